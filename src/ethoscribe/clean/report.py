"""What cleaning did to one session: the ``QualityReport``."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.pose import PoseTracks

FRACTIONS = (
    "frac_missing_raw",
    "frac_low_confidence",
    "frac_jumps",
    "frac_filled",
    "frac_missing_after",
)


@dataclass(frozen=True, eq=False)
class QualityReport:
    """What cleaning did to one session.

    Attributes
    ----------
    per_keypoint : DataFrame
        One row per animal and keypoint: ``session, animal, keypoint`` and the fractions of input
        frames missing in the raw data, masked for low confidence, masked as jumps, filled, and
        of output frames still missing (``frac_missing_after``).
    swaps_repaired : int
        Frames x animals where a declared pair was exchanged; ``swaps_per_pair`` by "left/right".
    invalid : bool array (output frames, animals)
        Frames where any keypoint is still missing: flagged, never invented.
    params : dict
        Resolved, JSON-able settings, including the ``max_speed`` actually used.
    """

    per_keypoint: pd.DataFrame
    swaps_repaired: int
    swaps_per_pair: dict[str, int]
    invalid: np.ndarray
    params: dict[str, Any]
    session: str = "session"
    animals: tuple[str, ...] = field(default=())

    def summary(self) -> dict[str, Any]:
        """JSON-able headline numbers of the session."""
        t = self.per_keypoint
        return {
            "session": self.session,
            "n_frames": int(self.invalid.shape[0]),
            "frac_invalid": float(self.invalid.mean()) if self.invalid.size else 0.0,
            "swaps_repaired": int(self.swaps_repaired),
            "swaps_per_pair": dict(self.swaps_per_pair),
            "max_speed": self.params.get("max_speed"),
            "units": self.params.get("units"),
            "fps": self.params.get("fps_out"),
            **{c: float(t[c].mean()) for c in FRACTIONS},
        }

    def to_frame(self) -> pd.DataFrame:
        """``per_keypoint`` plus ``frac_invalid_frames`` of each row's animal."""
        t = self.per_keypoint.copy()
        inv = dict(zip(self.animals, self.invalid.mean(axis=0).tolist(), strict=True))
        t["frac_invalid_frames"] = t["animal"].map(inv).astype(float)
        return t


def _report(
    raw: PoseTracks, out: PoseTracks, masks: dict[str, np.ndarray], swapped, pairs, params
) -> QualityReport:
    n_animals, n_kp = raw.n_animals, raw.n_keypoints
    missing_after = np.isnan(out.coords[..., 0])
    table = {
        "session": [raw.session] * (n_animals * n_kp),
        "animal": np.repeat(list(raw.animals), n_kp),
        "keypoint": np.tile(list(raw.keypoints), n_animals),
    }
    for name, m in (*masks.items(), ("frac_missing_after", missing_after)):
        table[name] = (np.count_nonzero(m, axis=0) / m.shape[0]).ravel()
    per_pair = {f"{a}/{b}": int(swapped[:, :, i].sum()) for i, (a, b) in enumerate(pairs)}
    return QualityReport(
        per_keypoint=pd.DataFrame(table),
        swaps_repaired=int(sum(per_pair.values())),
        swaps_per_pair=per_pair,
        invalid=missing_after.any(axis=2),
        params=params,
        session=raw.session,
        animals=tuple(raw.animals),
    )
