"""The HTML reports as a reader sees them: rendered by headless Chromium at 1366 px.

Data: the hand-made workspace of tests/test_compare.py (invented labels, seed 11). Checks what
a reader would notice: the file size, the group differences first, every figure drawn, no page
wider than the window, no repeated tick labels on an axis, no legend over an axis title, the
parameters as a table. A full-page screenshot of each report is written for a person to look at
(printed path).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from ethoscribe.workspace import compare, write_ethogram_report
from test_compare import PLANNED, make_workspace, rename_motif  # tests/ is on sys.path

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not Path(CHROMIUM).exists(), reason="needs chromium (apt install)"),
]
WIDTH, MAX_BYTES = 1366, 2_000_000

# Run in the page once plotly has drawn: facts about the layout, measured by the browser.
MEASURE = """() => {
  const boxes = (sel, root) => [...root.querySelectorAll(sel)].map(e => e.getBoundingClientRect());
  const hit = (a, b) => a.width > 0 && b.width > 0 && a.left < b.right && b.left < a.right
                        && a.top < b.bottom && b.top < a.bottom;
  const plots = [...document.querySelectorAll('.js-plotly-plot')];
  const repeated = [], overlaps = [];
  plots.forEach((p, i) => {
    p.querySelectorAll('.xaxislayer-above, .yaxislayer-above').forEach(layer => {
      const ticks = [...layer.querySelectorAll('text')].map(t => t.textContent);
      if (new Set(ticks).size !== ticks.length) repeated.push([i, ticks.join(' ')]);
    });
    const legend = boxes('.legend', p);
    const titles = boxes('.g-xtitle, .g-ytitle', p);
    legend.forEach(l => titles.forEach(t => { if (hit(l, t)) overlaps.push(i); }));
  });
  return {
    pageWidth: document.documentElement.scrollWidth,
    plots: plots.length,
    drawn: plots.filter(p => p.querySelector('.main-svg')).length,
    repeated, overlaps,
    headings: [...document.querySelectorAll('h2')].map(h => h.textContent),
    noPlotly: getComputedStyle(document.getElementById('no-plotly')).display,
  };
}"""


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    folder = make_workspace(tmp_path_factory.mktemp("render") / "ws")
    rename_motif(folder, "motif_01", "digging")
    compare(folder, folder.parent / "comparison", seed=3, planned=PLANNED)
    write_ethogram_report(folder, folder / "report.html")
    return {
        "comparison": folder.parent / "comparison" / "report.html",
        "ethogram": folder / "report.html",
    }


def _measure(path: Path, shot: Path) -> dict:
    playwright = pytest.importorskip("playwright.sync_api")
    with playwright.sync_playwright() as p:
        browser = p.chromium.launch(
            executable_path=CHROMIUM, args=["--no-sandbox", "--disable-gpu", "--no-first-run"]
        )
        try:
            page = browser.new_page(viewport={"width": WIDTH, "height": 900})
            page.goto(path.as_uri())
            page.wait_for_function(
                "() => [...document.querySelectorAll('.js-plotly-plot')]"
                ".every(p => p.querySelector('.main-svg'))",
                timeout=60_000,
            )
            facts = page.evaluate(MEASURE)
            page.screenshot(path=str(shot), full_page=True)
        finally:
            browser.close()
    return facts


@pytest.mark.parametrize("kind", ["comparison", "ethogram"])
def test_report_reads_well_at_laptop_width(reports, kind, tmp_path):
    path = reports[kind]
    size = path.stat().st_size
    assert size < MAX_BYTES, f"{kind} report is {size / 1e6:.2f} MB"
    text = path.read_text()
    assert text.count("plotly.js (cartesian") <= 1 and "<script src=" not in text
    shot = tmp_path / f"{kind}.png"
    facts = _measure(path, shot)
    print(f"\n{kind}: {size / 1e6:.2f} MB, {facts['plots']} figures, screenshot {shot}")
    assert facts["plots"] >= 5 and facts["drawn"] == facts["plots"]
    assert facts["noPlotly"] == "none"  # plotly.js loaded from the page itself
    assert facts["pageWidth"] <= WIDTH, "something runs off the page"
    assert not facts["repeated"], f"repeated tick labels: {facts['repeated']}"
    assert not facts["overlaps"], f"legend over an axis title in figures {facts['overlaps']}"
    assert facts["headings"][-1] == "Parameters, versions and seeds" and "<pre>" not in text
    assert shot.stat().st_size > 50_000
    if kind == "comparison":
        assert facts["headings"][0] == "Group differences"
        assert "Planned (confirmatory" in text and "How the tests were corrected" in text
    else:
        assert "Group differences" not in facts["headings"]
