"""``FeatureSet``: the features of one animal in one session."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

import numpy as np

from ethoscribe.errors import InputError

if TYPE_CHECKING:
    import pandas as pd


@dataclass(frozen=True, eq=False)
class FeatureSet:
    """Features of one animal in one session.

    Parameters
    ----------
    values : array, shape (F, n_features)
        float64; rows of invalid frames are NaN.
    columns : tuple of str
        Feature names, one per column.
    valid : array, shape (F,)
        True where every feature of the frame is finite.
    session, animal : str
    fps : float
    meta : mapping
        Units, whether causal / standardised, origin and axis used.

    Examples
    --------
    >>> fs = FeatureSet(np.zeros((3, 1)), ("a",), np.ones(3, bool), "s", "m", 30.0)
    >>> fs.to_frame().shape
    (3, 6)
    """

    values: np.ndarray
    columns: tuple[str, ...]
    valid: np.ndarray
    session: str
    animal: str
    fps: float
    meta: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        values = np.asarray(self.values, dtype=np.float64)
        valid = np.asarray(self.valid)
        columns = tuple(str(c) for c in self.columns)
        where = f"features of session '{self.session}', animal '{self.animal}'"
        if values.ndim != 2 or values.shape[1] != len(columns):
            msg = f"{where}: values must be (frames, {len(columns)} columns); got {values.shape}"
            raise InputError(msg)
        if valid.dtype != bool or valid.shape != (len(values),):
            msg = (
                f"{where}: valid must be a bool array of shape ({len(values)},); got {valid.shape}"
            )
            raise InputError(msg)
        if (valid & ~np.isfinite(values).all(1)).any():
            raise InputError(f"{where}: frames marked valid contain NaN or infinite values")
        values.setflags(write=False)
        valid.setflags(write=False)
        for name, v in (("values", values), ("valid", valid), ("columns", columns)):
            object.__setattr__(self, name, v)
        object.__setattr__(self, "session", str(self.session))
        object.__setattr__(self, "animal", str(self.animal))
        object.__setattr__(self, "fps", float(self.fps))
        object.__setattr__(self, "meta", MappingProxyType(dict(self.meta)))

    @property
    def n_frames(self) -> int:
        return self.values.shape[0]

    @property
    def n_features(self) -> int:
        return self.values.shape[1]

    def to_frame(self) -> pd.DataFrame:
        """A pandas DataFrame: ``session, animal, frame, time_s, valid`` then one column per
        feature."""
        import pandas as pd

        frames = np.arange(self.n_frames)
        head = {
            "session": self.session,
            "animal": self.animal,
            "frame": frames,
            "time_s": frames / self.fps,
            "valid": self.valid,
        }
        body = pd.DataFrame(self.values, columns=list(self.columns))
        return pd.concat([pd.DataFrame(head), body], axis=1)
