"""The Jupyter workbench: thin ipywidgets + plotly bindings over the library.

``ethoscribe.workbench(path)`` opens it on a workspace; see :mod:`ethoscribe.widgets.workbench`.
``ethoscribe.new_study()`` goes from a folder of pose files to the workbench without code.
"""

from ethoscribe.widgets.new_study import NewStudy, new_study
from ethoscribe.widgets.state import WorkbenchState
from ethoscribe.widgets.workbench import Workbench, workbench

__all__ = ["NewStudy", "Workbench", "WorkbenchState", "new_study", "workbench"]
