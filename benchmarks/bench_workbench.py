"""Benchmark: the workbench's interactions on a workspace of about a million frames.

Builds a real two-session workspace from the bundled example sessions (``discover``), then
inflates it to ``--sessions`` sessions (default 112 x 9000 = 1,008,000 frames) by repeating its
labels, sessions, quality rows and cached postures under new session names (every copy points
at one of the two real source files, so everything the workbench reads is genuine). Then it
opens the workbench and times the Python side of each interaction -- the callback that a click
runs, including the figure updates it sends -- and the background disk write of an edit.

    python benchmarks/bench_workbench.py              # ~1-2 minutes, most of it building
    python benchmarks/bench_workbench.py --sessions 12   # quick look (~100k frames)
    python benchmarks/bench_workbench.py --open results  # cold opens of a workspace

``--open`` times what a user waits for in a fresh kernel, in fresh processes (``--repeats``):
``import ethoscribe; ethoscribe.workbench(path)`` until the first screen is built (motif list,
names, counts, the curation desk), then until the Motifs page's figures are made (the
workbench makes them right after its first screen is shown).

Prints one line per interaction: median and worst wall time of the repeats and the median CPU
time of the kernel's thread, in milliseconds (on a shared machine the CPU time is the steadier
figure). Edits are written by a writer process meanwhile; its total is printed too.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

from ethoscribe.io._atomic import write_table
from ethoscribe.workspace import Workspace, discover
from ethoscribe.workspace.folder import write_ethogram_tables
from ethoscribe.workspace.postures import (
    SessionPostures,
    _cache_path,
    _key,
    _save,
    session_postures,
    source_file,
)

EXAMPLES = Path(__file__).resolve().parents[1] / "example_sessions"


def build(folder: Path, n_sessions: int) -> Path:
    """A workspace of ``n_sessions`` x 9000 frames (see the module docstring)."""
    small = folder / "small"
    inputs = [EXAMPLES / "session_01.parquet", EXAMPLES / "session_09.parquet"]
    discover(
        inputs, small, manifest=EXAMPLES / "manifest.csv", states=6, stability=False, progress=False
    )
    ws = Workspace(small)
    model = ws.model()
    real = ws.sessions.astype({"session": str})
    postures = {s: session_postures(ws, s, model) for s in real["session"]}
    labels, sessions, quality = ws.state_labels(), [], []
    quality_table = pd.read_csv(small / "quality.csv")
    big = folder / "big"
    shutil.copytree(small, big, ignore=shutil.ignore_patterns("postures", "journal*"))
    parts = []
    for i in range(n_sessions):
        source = real.iloc[i % len(real)]
        name = f"session_{i + 1:04d}"
        parts.append(labels[labels["session"] == source["session"]].assign(session=name))
        sessions.append(
            {
                **source.to_dict(),
                "session": name,
                "group": ("standard", "enriched")[i % 2],
                "subject": f"animal_{i:04d}",
            }
        )
        quality.append(
            quality_table[quality_table["session"] == source["session"]].assign(session=name)
        )
    big_labels = pd.concat(parts, ignore_index=True)
    write_table(big_labels, big / "labels.parquet")
    write_table(pd.DataFrame(sessions), big / "sessions.csv")
    write_table(pd.concat(quality, ignore_index=True), big / "quality.csv")
    write_ethogram_tables(big, big_labels)
    summary = json.loads((big / "summary.json").read_text())
    summary.update(n_sessions=n_sessions, n_frames=len(big_labels))
    (big / "summary.json").write_text(json.dumps(summary))
    ws_big = Workspace(big)
    for row in sessions:  # cached postures: the real session's, under the copy's name
        p = postures[str(real.loc[real["source"] == row["source"], "session"].iloc[0])]
        key = _key(source_file(ws_big, row["session"]), model)
        copy = SessionPostures(row["session"], p.coords, p.animals, p.keypoints, p.fps, p.units)
        _save(_cache_path(ws_big, row["session"]), copy, key)
    return big


def timed(label: str, actions, repeats: int = 5) -> None:
    """Wall and CPU time of the kernel side (the machine may be shared: CPU time is steadier)."""
    wall, cpu = [], []
    for i in range(repeats):
        start, start_cpu = time.perf_counter(), time.thread_time()
        actions(i)
        wall.append(1000 * (time.perf_counter() - start))
        cpu.append(1000 * (time.thread_time() - start_cpu))
    print(
        f"{label:<30} wall median {statistics.median(wall):6.1f} ms, worst {max(wall):6.1f} ms"
        f" | cpu median {statistics.median(cpu):6.1f} ms"
    )


# One cold open, in a fresh process: seconds to the first screen, then to the figures.
# One cold open, in a fresh process: wall and CPU seconds (the process's own, imports
# included) to the first screen, then to the figures.
COLD_OPEN = """
import sys, time
import IPython  # a notebook kernel has it loaded before any cell runs
start, start_cpu = time.perf_counter(), time.process_time()
import ethoscribe
wb = ethoscribe.workbench(sys.argv[1])
first = (time.perf_counter() - start, time.process_time() - start_cpu)
getattr(wb.portrait, "make_figures", lambda: None)()  # made in the constructor before
figures = (time.perf_counter() - start, time.process_time() - start_cpu)
print(*first, *figures)
wb.close()
"""


def cold_opens(path: Path, repeats: int) -> None:
    """Median and worst of ``repeats`` cold opens of the workspace ``path``."""
    rows = []
    for _ in range(repeats):
        out = subprocess.run(
            [sys.executable, "-c", COLD_OPEN, str(path)], capture_output=True, text=True, check=True
        )
        rows.append([float(v) for v in out.stdout.split()])
    for label, col in (("first screen", 0), ("figures made", 2)):
        wall, cpu = [r[col] for r in rows], [r[col + 1] for r in rows]
        print(
            f"{label:<14} wall median {statistics.median(wall):5.2f} s, worst {max(wall):5.2f} s"
            f" | cpu median {statistics.median(cpu):5.2f} s ({repeats} fresh processes)"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sessions", type=int, default=112)
    parser.add_argument("--open", type=Path, help="only time cold opens of this workspace")
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    if args.open is not None:
        cold_opens(args.open, args.repeats)
        return
    from ethoscribe.widgets import Workbench

    with tempfile.TemporaryDirectory() as tmp:
        start = time.perf_counter()
        path = build(Path(tmp), args.sessions)
        n = Workspace(path).summary["n_frames"]
        print(f"built a workspace of {n:,} frames in {time.perf_counter() - start:.0f} s")
        start = time.perf_counter()
        wb = Workbench(path)
        print(f"opened the workbench in {time.perf_counter() - start:.1f} s")
        state, desk = wb.state, wb.desk
        motifs = list(state.motifs)
        timed("select a motif", lambda i: state.select_motif(motifs[(i + 1) % len(motifs)]))
        timed(
            "sort the motif list",
            lambda i: setattr(
                wb.motif_list.sort, "value", ["stability", "name", "time share"][i % 3]
            ),
        )

        def rename(i):
            desk.name.value = f"renamed_{i}"
            desk.rename.click()

        timed("rename (view updated)", rename)

        def merge(i):
            desk.merge_with.value = (next(m for m in state.motifs if m != state.motif),)
            desk.merge_into.value = f"merged_{i}"
            desk.merge.click()

        timed("merge two motifs", merge, 3)
        timed("undo", lambda i: desk.undo.click(), 3)
        start = time.perf_counter()
        state.flush()
        print(
            f"{'(writer process, 11 edits)':<30} all on disk {time.perf_counter() - start:.1f} s "
            "after the last click"
        )
        wb.tabs.selected_index = 1  # the Ethogram page
        sessions = state.sessions["session"].tolist()
        timed(
            "raster: change session",
            lambda i: setattr(wb.ethogram.session, "value", sessions[(i * 37 + 5) % len(sessions)]),
        )
        trace = next(t for t in wb.ethogram.raster.data if t.type == "bar" and len(t.x))

        def click(i):
            from plotly.callbacks import Points

            points = Points(point_inds=[i], xs=[], ys=[], trace_name=trace.name, trace_index=0)
            wb.ethogram._clicked(trace, points)

        timed("raster: click a bout", click)
        timed("close-up: next frame", lambda i: setattr(wb.ethogram.step, "value", i + 1))
        wb.close()


if __name__ == "__main__":
    main()
