"""The workbench in a real browser: JupyterLab + Chromium, end to end.

Runs the quickstart notebook in a private JupyterLab server on a laptop-sized window (1366 x 768,
file browser open), checks that the workbench fits its width (nothing cut off at the right),
renames a motif by typing into the rendered widget and pressing Enter, clicks Save, and checks
the saved ethogram on disk carries the new name, that the Motifs page's five plotly figures drew
marks (points, bars, lines: not only their axes), before and after the rename, and that no
output shows a widget error. Every wait is for an element or a state, with a generous ceiling
(a loaded 2-core machine is slow), never a fixed sleep. A screenshot of the workbench as it
opens (example sessions, before any test edit) is written to ``$ETHOSCRIBE_ARTIFACTS`` (default:
the test's temporary folder); with ``ETHOSCRIBE_UPDATE_SCREENSHOT=1`` it is also copied to
``docs/workbench.png``.

Needs ``/usr/bin/chromium`` (``apt-get install -y chromium``) and the ``jupyterlab`` and
``playwright`` packages; skipped without them. Playwright's own browser download is never used.
"""

from __future__ import annotations

import json
import os
import re
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pandas as pd
import pytest

pytestmark = [pytest.mark.browser, pytest.mark.slow]

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--disable-quic",
]
NEW_NAME = "browser_named"
BAD_OUTPUT = ("Error displaying widget", "Loading widget", "Traceback")
VIEWPORT = {"width": 1366, "height": 768}  # a common laptop screen
WAIT_MS = 180_000  # ceiling of every wait for an element: generous, the waits end on the event

# At least N plotly figures drawn (an SVG of non-zero size) on the workbench's visible page.
FIGURES_DRAWN = """(n) => {
  const bench = document.querySelector('.ethoscribe-workbench');
  if (!bench) return false;
  const drawn = [...bench.querySelectorAll('.js-plotly-plot .main-svg')].filter(
    (svg) => svg.getBoundingClientRect().width > 0);
  return new Set(drawn.map((svg) => svg.closest('.js-plotly-plot'))).size >= n;
}"""

# Marks drawn in the figure of CSS class ``css``: markers and bars (plotly's ``.point``) and
# lines with a path. Axes alone (an empty figure) count none.
MARKS = """(css) => {
  const fig = document.querySelector('.ethoscribe-workbench .' + css);
  if (!fig) return 0;
  return [...fig.querySelectorAll('.main-svg .point, .main-svg path.js-line')].filter(
    (el) => el.tagName !== 'path' || (el.getAttribute('d') || '').length > 2).length;
}"""
MOTIF_FIGURES = (
    "ethoscribe-posture",
    "ethoscribe-examples",
    "ethoscribe-shares",
    "ethoscribe-durations",
    "ethoscribe-neighbours",
)


def _wait_marks(page, figures=MOTIF_FIGURES) -> None:
    """Every one of ``figures`` has drawn marks (not only its axes)."""
    from playwright.sync_api import TimeoutError as Timeout

    for css in figures:
        try:
            page.wait_for_function(f"() => ({MARKS})('{css}') > 0", timeout=WAIT_MS)
        except Timeout:
            marks = {c: page.evaluate(f"() => ({MARKS})('{c}')") for c in figures}
            raise AssertionError(f"{css} drew no marks; marks per figure: {marks}") from None


# Parts of the workbench wider than it (cut off at the right edge), as [class, overflow px].
OVERFLOW = """(bench) => {
  const edge = bench.getBoundingClientRect().right + 1;
  const out = [];
  for (const el of bench.querySelectorAll('.main-svg, .widget-slider, .widget-checkbox,'
      + ' .widget-select, .widget-text, .widget-button, .widget-dropdown')) {
    const box = el.getBoundingClientRect();
    if (box.width > 0 && box.right > edge) out.push([el.className.baseVal ?? el.className,
                                                     Math.round(box.right - edge)]);
  }
  if (bench.scrollWidth > bench.clientWidth + 1) out.push(['workbench scrolls sideways',
                                                           bench.scrollWidth - bench.clientWidth]);
  return out;
}"""


def _needs() -> str:
    if not CHROMIUM.is_file():
        pytest.skip("no /usr/bin/chromium (apt-get install -y chromium)")
    pytest.importorskip("playwright.sync_api", reason="pip install playwright")
    pytest.importorskip("jupyterlab", reason="pip install jupyterlab")
    exe = Path(sys.executable).with_name("jupyter-lab")
    found = str(exe) if exe.is_file() else shutil.which("jupyter-lab")
    if found is None:
        pytest.skip("jupyter-lab is not on the path")
    return found


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _settings(folder: Path) -> None:
    """Private JupyterLab settings: no news pop-up, all cells in the page, kernel auto-start."""
    files = {
        "@jupyterlab/apputils-extension/notification.jupyterlab-settings": {
            "fetchNews": "false",
            "checkForUpdates": False,
        },
        "@jupyterlab/notebook-extension/tracker.jupyterlab-settings": {
            "windowingMode": "none",
            "autoStartDefaultKernel": True,
        },
    }
    for name, value in files.items():
        path = folder / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(value))


def _get(url: str) -> int:
    try:
        with urllib.request.urlopen(url, timeout=5) as response:
            return response.status
    except OSError:
        return 0


class Lab:
    """A JupyterLab server in its own process group, on a free port with a random token."""

    def __init__(self, exe: str, root: Path, private: Path) -> None:
        self.port, self.token = _free_port(), secrets.token_hex(16)
        dirs = {
            name: private / name
            for name in ("settings", "workspaces", "config", "runtime", "ipython")
        }
        for d in dirs.values():
            d.mkdir(parents=True)
        _settings(dirs["settings"])
        env = {
            **os.environ,
            "JUPYTERLAB_SETTINGS_DIR": str(dirs["settings"]),
            "JUPYTERLAB_WORKSPACES_DIR": str(dirs["workspaces"]),
            "JUPYTER_CONFIG_DIR": str(dirs["config"]),
            "JUPYTER_RUNTIME_DIR": str(dirs["runtime"]),
            "IPYTHONDIR": str(dirs["ipython"]),
        }
        command = [
            exe,
            "--no-browser",
            "--ip=127.0.0.1",
            f"--port={self.port}",
            "--ServerApp.port_retries=0",
            f"--IdentityProvider.token={self.token}",
            f"--ServerApp.root_dir={root}",
            "--allow-root",
            "--LabApp.news_url=None",
        ]
        self.log = open(private / "server.log", "w")  # closed in stop()
        self.proc = subprocess.Popen(
            command, env=env, stdout=self.log, stderr=subprocess.STDOUT, start_new_session=True
        )
        self.base = f"http://127.0.0.1:{self.port}"

    def wait_ready(self, timeout: float = 60) -> None:
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            if self.proc.poll() is not None:
                raise AssertionError(f"JupyterLab exited early; see {self.log.name}")
            if _get(f"{self.base}/api/status?token={self.token}") == 200:
                return
            time.sleep(0.5)
        raise AssertionError(f"JupyterLab did not answer within {timeout} s; see {self.log.name}")

    def stop(self) -> None:
        try:
            request = urllib.request.Request(
                f"{self.base}/api/shutdown?token={self.token}", method="POST", data=b""
            )
            urllib.request.urlopen(request, timeout=10).close()
            self.proc.wait(timeout=20)
        except (OSError, subprocess.TimeoutExpired):
            pass
        for sig in (signal.SIGTERM, signal.SIGKILL):  # what is left of the group we started
            try:
                os.killpg(self.proc.pid, sig)
            except ProcessLookupError:
                break
            time.sleep(1)
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            pass
        self.log.close()


@pytest.fixture
def lab(tmp_path):
    exe = _needs()
    root = tmp_path / "lab"
    (root / "notebooks").mkdir(parents=True)
    shutil.copy(ROOT / "notebooks" / "quickstart.ipynb", root / "notebooks" / "quickstart.ipynb")
    (root / "example_sessions").symlink_to(ROOT / "example_sessions")
    server = Lab(exe, root, tmp_path / "private")
    try:
        server.wait_ready()
        yield server, root
    finally:
        server.stop()


def _wait_idle(page, timeout_ms: int) -> None:
    """The status bar names the kernel and says Idle (the toolbar alone can say idle too soon)."""
    page.wait_for_function(
        "() => { const bar = document.querySelector('#jp-main-statusbar');"
        " return bar && /Python 3/.test(bar.innerText) && /Idle/.test(bar.innerText); }",
        timeout=timeout_ms,
    )


def _outputs(page) -> list[str]:
    return page.locator(".jp-OutputArea-output").all_inner_texts()


def test_quickstart_in_jupyterlab_rename_and_save(lab, tmp_path):
    from playwright.sync_api import expect, sync_playwright

    server, root = lab
    workspace = root / "notebooks" / "quickstart_workspace"
    url = f"{server.base}/lab/tree/notebooks/quickstart.ipynb?reset&token={server.token}"
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        page = browser.new_page(viewport=VIEWPORT)
        expect.set_options(timeout=WAIT_MS)
        try:
            page.goto(url)
            _wait_idle(page, WAIT_MS)
            expect(page.locator(".jp-FileBrowser").first).to_be_visible()  # as users have it
            page.locator(".jp-Notebook").first.click()  # focus the notebook, not the file list
            page.get_by_role("menuitem", name="Run", exact=True).click()
            page.get_by_role("menuitem", name="Run All Cells", exact=True).click()
            bench = page.locator(".ethoscribe-workbench")
            expect(bench).to_be_visible()
            expect(page.get_by_text("Saved the ethogram in").first).to_be_visible()
            _wait_idle(page, WAIT_MS)
            # A 768 px screen shows part of the workbench at once: bring its top into view, then
            # wait for the Motifs page's five figures (posture, examples, shares, durations,
            # neighbours) to be drawn.
            bench.evaluate("el => el.scrollIntoView({block: 'start'})")
            page.wait_for_function(FIGURES_DRAWN, arg=5, timeout=WAIT_MS)
            _wait_marks(page)  # the example bouts and neighbours drew empty axes once
            assert bench.evaluate(OVERFLOW) == [], "cut off at 1366 px"
            expect(bench.get_by_text("largest first")).to_be_visible()
            _screenshot(page, bench, tmp_path)
            desk = bench.locator(".ethoscribe-curation")
            desk.scroll_into_view_if_needed()
            motif = desk.inner_text().split("\n")[0]
            motif = re.sub(r"^Curate\s+", "", motif).strip()
            assert re.fullmatch(r"motif_\d\d", motif), motif

            box = bench.locator(".ethoscribe-rename-text input")
            box.click()
            box.press_sequentially(NEW_NAME)
            box.press("Enter")  # Enter renames, as the Rename button does
            note = bench.locator(".ethoscribe-message .ethoscribe-note-ok")
            expect(note).to_contain_text(f"Renamed '{motif}' to '{NEW_NAME}'")
            expect(bench.locator(".ethoscribe-neighbours")).to_contain_text(NEW_NAME)
            expect(bench.locator(".ethoscribe-examples")).to_contain_text(NEW_NAME)
            _wait_marks(page)  # redrawn under the new name, with their marks
            bench.locator(".ethoscribe-save-button").click()
            expect(note).to_contain_text("Saved the ethogram in")

            for table in ("bouts.csv", "labels.csv", "exports/bouts.csv", "exports/labels.csv"):
                names = set(pd.read_csv(workspace / table)["motif"].dropna().astype(str))
                assert NEW_NAME in names and motif not in names, table
            last = json.loads((workspace / "journal.jsonl").read_text().splitlines()[-1])
            assert (last["op"], last["motif"], last["name"]) == ("rename", motif, NEW_NAME)
            assert NEW_NAME in (workspace / "report.html").read_text()

            assert bench.locator(".main-svg").count() >= 6
            texts = _outputs(page)
            assert texts, "no output rendered"
            for text in texts:
                for bad in BAD_OUTPUT:
                    assert bad not in text, f"an output shows {bad!r}: {text[:300]}"
        except Exception:
            folder = Path(os.environ.get("ETHOSCRIBE_ARTIFACTS", tmp_path))
            folder.mkdir(parents=True, exist_ok=True)
            page.screenshot(path=str(folder / "page-at-failure.png"))  # what the user saw
            raise
        finally:
            browser.close()


def _screenshot(page, bench, tmp_path: Path) -> None:
    """The workbench as a laptop screen shows it (its top, 1366 px wide)."""
    folder = Path(os.environ.get("ETHOSCRIBE_ARTIFACTS", tmp_path))
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "workbench.png"
    bench.evaluate("el => el.scrollIntoView({block: 'start'})")
    bench.screenshot(path=str(path))
    assert path.stat().st_size > 10_000
    if os.environ.get("ETHOSCRIBE_UPDATE_SCREENSHOT") == "1":
        (ROOT / "docs").mkdir(exist_ok=True)
        shutil.copy(path, ROOT / "docs" / "workbench.png")
