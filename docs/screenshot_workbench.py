"""Make ``docs/workbench.png``: the workbench on the example study, as a user sees it.

Builds the README's example results (``discover`` on ``example_sessions/`` with its manifest,
about two minutes; or copies a workspace given with ``--workspace``) into a temporary folder
as ``results``, opens a notebook holding the README's two lines::

    import ethoscribe
    ethoscribe.workbench("results")

in a private JupyterLab server, runs it in headless Chromium (``/usr/bin/chromium``) on a
1366 px wide window with the file browser open, waits until the Motifs page's figures are
drawn and saves the workbench as ``docs/workbench.png``. With ``--panels DIR`` it also saves,
at 1366 x 768, each figure of the Motifs page and each of the other pages, to look at.

    python docs/screenshot_workbench.py
    python docs/screenshot_workbench.py --workspace results --panels /tmp/panels

Needs the ``jupyterlab`` and ``playwright`` packages (the browser of the system is used,
never a download); the JupyterLab helpers are those of ``tests/test_browser.py``.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from test_browser import (  # noqa: E402 - the test's server helpers
    CHROMIUM,
    CHROMIUM_ARGS,
    FIGURES_DRAWN,
    MARKS,
    MOTIF_FIGURES,
    WAIT_MS,
    Lab,
    _needs,
    _wait_idle,
    _wait_marks,
)

NOTEBOOK_CODE = 'import ethoscribe\nethoscribe.workbench("results")'
WIDTH = 1366
FIGURES = MOTIF_FIGURES
# Every figure on the page shown has marks, or says why it has none (an annotation).
PAGE_DRAWN = """() => {
  const page = document.querySelector(
    '.ethoscribe-pages .widget-tab-contents > :not(.lm-mod-hidden)');
  if (!page || page.textContent.includes('Loading the study overview')) return false;
  const plots = [...page.querySelectorAll('.js-plotly-plot')];
  return plots.every((p) => p.querySelector('.main-svg .point, .main-svg path.js-line,'
                                            + ' .main-svg .annotation'));
}"""


def build(root: Path, workspace: Path | None) -> None:
    """``root/results`` (the example study's workspace) and ``root/workbench.ipynb``."""
    if workspace is not None:
        shutil.copytree(workspace, root / "results", ignore=shutil.ignore_patterns("*.lock"))
    else:
        from ethoscribe.workspace import discover

        examples = ROOT / "example_sessions"
        discover([examples], root / "results", manifest=examples / "manifest.csv")
    cell = {"cell_type": "code", "execution_count": None, "metadata": {}, "outputs": []}
    notebook = {
        "cells": [{**cell, "source": NOTEBOOK_CODE}],
        "metadata": {"kernelspec": {"name": "python3", "display_name": "Python 3"}},
        "nbformat": 4,
        "nbformat_minor": 5,
    }
    (root / "workbench.ipynb").write_text(json.dumps(notebook))


def shoot(root: Path, private: Path, out: Path, panels: Path | None) -> None:
    from playwright.sync_api import expect, sync_playwright

    server = Lab(_needs(), root, private)
    try:
        server.wait_ready()
        url = f"{server.base}/lab/tree/workbench.ipynb?reset&token={server.token}"
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
            page = browser.new_page(viewport={"width": WIDTH, "height": 768})
            expect.set_options(timeout=WAIT_MS)
            try:
                page.goto(url)
                _wait_idle(page, WAIT_MS)
                expect(page.locator(".jp-FileBrowser").first).to_be_visible()
                page.locator(".jp-Notebook").first.click()
                page.get_by_role("menuitem", name="Run", exact=True).click()
                page.get_by_role("menuitem", name="Run All Cells", exact=True).click()
                bench = page.locator(".ethoscribe-workbench")
                expect(bench).to_be_visible()
                bench.evaluate("el => el.scrollIntoView({block: 'start'})")
                page.wait_for_function(FIGURES_DRAWN, arg=len(FIGURES), timeout=WAIT_MS)
                _wait_marks(page)
                _wait_idle(page, WAIT_MS)
                for css in FIGURES:
                    print(f"{css}: {page.evaluate(MARKS, css)} drawn marks")
                if panels is not None:
                    _panels(page, bench, panels)
                # A window tall enough for the whole Motifs page (JupyterLab scrolls inside
                # its panels: an element's screenshot shows only what the window shows).
                page.locator(".ethoscribe-pages .lm-TabBar-tab").first.click()
                tall = bench.evaluate("el => el.getBoundingClientRect().height")
                page.set_viewport_size({"width": WIDTH, "height": int(tall) + 250})
                bench.evaluate("el => el.scrollIntoView({block: 'start'})")
                _wait_marks(page)
                page.wait_for_timeout(1000)  # plotly redraws after the window is resized
                bench.screenshot(path=str(out))
                print(f"wrote {out}")
            finally:
                browser.close()
    finally:
        server.stop()


def _panels(page, bench, folder: Path) -> None:
    """Each figure of the Motifs page, then each page, at 1366 x 768."""
    folder.mkdir(parents=True, exist_ok=True)
    page.screenshot(path=str(folder / "screen_top.png"))
    for css in FIGURES:
        bench.locator(f".{css}").screenshot(path=str(folder / f"{css}.png"))
    bench.locator(".ethoscribe-curation").screenshot(path=str(folder / "curation.png"))
    tabs = bench.locator(".ethoscribe-pages .lm-TabBar-tab")
    for i, name in enumerate(("ethogram", "study", "groups"), start=1):
        tabs.nth(i).click()
        _wait_idle(page, WAIT_MS)
        page.wait_for_function(PAGE_DRAWN, timeout=WAIT_MS)  # its figures arrive after it
        page.screenshot(path=str(folder / f"screen_{name}.png"))
        # The whole page: a window as tall as it (JupyterLab scrolls inside its panels).
        tall = bench.evaluate("el => el.getBoundingClientRect().height")
        page.set_viewport_size({"width": WIDTH, "height": int(tall) + 250})
        bench.evaluate("el => el.scrollIntoView({block: 'start'})")
        page.wait_for_timeout(1500)
        bench.screenshot(path=str(folder / f"page_{name}.png"))
        page.set_viewport_size({"width": WIDTH, "height": 768})
    print(f"wrote the panels to {folder}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workspace", type=Path, help="copy this workspace instead of building")
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "workbench.png")
    parser.add_argument("--panels", type=Path, help="also save each panel here (1366 x 768)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "lab"
        root.mkdir()
        build(root, args.workspace)
        shoot(root, Path(tmp) / "private", args.out, args.panels)


if __name__ == "__main__":
    main()
