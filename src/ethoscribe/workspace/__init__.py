"""A project folder on disk, and the batch runs that create and use one.

See :mod:`ethoscribe.workspace.folder` for the layout. This package is the only place that knows it.
"""

from ethoscribe.workspace.compare import compare, write_ethogram_report
from ethoscribe.workspace.export import save_ethogram
from ethoscribe.workspace.folder import Workspace, read_journal
from ethoscribe.workspace.reading import read_sessions
from ethoscribe.workspace.runs import discover, label_sessions

__all__ = [
    "Workspace",
    "compare",
    "discover",
    "label_sessions",
    "read_journal",
    "read_sessions",
    "save_ethogram",
    "write_ethogram_report",
]
