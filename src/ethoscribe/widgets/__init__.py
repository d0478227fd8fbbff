"""The Jupyter workbench: thin ipywidgets + plotly bindings over the library.

``ethoscribe.workbench(path)`` opens it on a workspace; see :mod:`ethoscribe.widgets.workbench`.
"""

from ethoscribe.widgets.state import WorkbenchState
from ethoscribe.widgets.workbench import Workbench, workbench

__all__ = ["Workbench", "WorkbenchState", "workbench"]
