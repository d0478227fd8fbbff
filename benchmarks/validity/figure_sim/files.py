"""Writing a study: tidy pose tables, truth tables, a manifest and a summary (numpy only).

- ``<session>.csv``: ``frame, keypoint, x, y, z, confidence`` (millimetres; a lost marker
  has empty x, y, z and confidence 0), one row per frame and marker.
- ``truth/<session>.csv``: ``frame, label``, one row per frame.
- ``manifest.csv``: ``session, path, fps, units, subject, height_m``.
- ``study.json``: seed, movements, and per take the bouts and recording facts.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
from benchmarks.validity.figure_sim.body import MARKERS
from benchmarks.validity.figure_sim.movements import MOVEMENTS
from benchmarks.validity.figure_sim.take import Take


def _write_text(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text)
    os.replace(tmp, path)


def pose_table_text(coords: np.ndarray, confidence: np.ndarray) -> str:
    """The tidy CSV text of one take: one formatted line per marker, one format per frame."""
    n, k, _ = coords.shape
    frame = np.repeat(np.arange(n, dtype=np.float64)[:, None], k, 1)
    rows = np.concatenate([frame[..., None], coords, confidence[..., None]], 2).reshape(n, 5 * k)
    line = "\n".join(f"%d,{m},%.1f,%.1f,%.1f,%.3f" for m in MARKERS)
    body = "\n".join(line % tuple(r) for r in rows.tolist())
    return "frame,keypoint,x,y,z,confidence\n" + body.replace("nan", "") + "\n"


def truth_table_text(truth: np.ndarray) -> str:
    names = np.asarray(MOVEMENTS)[truth]
    return "frame,label\n" + "".join(f"{i},{m}\n" for i, m in enumerate(names.tolist()))


def write_study(out: Path, takes: list[Take], seed: int) -> list[Path]:
    """Write every take, the truth, the manifest and ``study.json`` into ``out``."""
    out = Path(out)
    (out / "truth").mkdir(parents=True, exist_ok=True)
    rows = ["session,path,fps,units,subject,height_m"]
    summary = {"seed": seed, "movements": MOVEMENTS, "markers": MARKERS, "takes": {}}
    written = []
    for take in takes:
        s = take.subject
        path = out / f"{s.name}.csv"
        _write_text(path, pose_table_text(take.coords, take.confidence))
        _write_text(out / "truth" / f"{s.name}.csv", truth_table_text(take.truth))
        rows.append(f"{s.name},{path.name},{s.fps:g},mm,{s.name},{s.body.height:.3f}")
        b = take.bouts
        summary["takes"][s.name] = {
            "fps": s.fps,
            "frames": int(b.n_frames),
            "height_m": round(s.body.height, 3),
            "cadence": round(s.cadence, 3),
            "vigour": round(s.vigour, 3),
            "noise_mm": round(s.noise_mm, 2),
            "bouts": [
                {"movement": MOVEMENTS[c], "first_frame": int(f), "transition_frames": int(r)}
                for c, f, r in zip(b.code, b.start, b.ramp, strict=True)
            ],
            **take.facts,
        }
        written.append(path)
    _write_text(out / "manifest.csv", "\n".join(rows) + "\n")
    _write_text(out / "study.json", json.dumps(summary, indent=1))
    return written
