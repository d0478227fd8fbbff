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
    "new_study",
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
    # The ways in from the package root to the workbench layer, loaded on first call only.
    widgets = importlib.import_module("ethoscribe.widgets")
    return widgets.workbench(path, skeleton)


def new_study(folder: str | PathLike[str] = "") -> Any:
    """A panel to discover motifs in a folder of pose files, then open the workbench on them.

    For people who prefer not to write code: choose the files (or a manifest), the frame rate
    and units, check what would be read and the automatic body axis, and press Discover.

    Examples
    --------
    >>> import ethoscribe
    >>> ethoscribe.new_study("my_pose_files")  # doctest: +SKIP
    """
    widgets = importlib.import_module("ethoscribe.widgets")
    return widgets.new_study(folder)
