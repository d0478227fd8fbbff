"""ethoscribe: from keypoint tracks to a named, trustworthy ethogram."""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from ethoscribe.errors import EthoscribeError, InputError, NotFittedError
from ethoscribe.pose import PoseTracks

if TYPE_CHECKING:
    from collections.abc import Sequence
    from os import PathLike

__version__ = "0.1.0"

__all__ = [
    "EthoscribeError",
    "InputError",
    "NotFittedError",
    "PoseTracks",
    "__version__",
    "workbench",
]


def workbench(path: str | PathLike[str], skeleton: Sequence[tuple[str, str]] | None = None) -> Any:
    """Open the JupyterLab workbench on a workspace folder (see ``ethoscribe.widgets``).

    Returns an ``ethoscribe.widgets.Workbench`` (an ipywidgets box; display it). The widget
    libraries are imported on first use so that ``import ethoscribe`` stays light.

    Examples
    --------
    >>> import ethoscribe
    >>> ethoscribe.workbench("study_ws")  # doctest: +SKIP
    """
    # The one way in from the package root to the workbench layer, loaded on first call only.
    widgets = importlib.import_module("ethoscribe.widgets")
    return widgets.workbench(path, skeleton)
