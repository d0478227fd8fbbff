"""The example notebooks: committed without outputs, and every cell runs headless.

Each notebook runs in a copy of the notebooks folder beside a link to the example sessions, so
the workspaces it writes land in a temporary folder, never in the repository.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import nbformat
import pytest

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOKS = sorted((ROOT / "notebooks").glob("*.ipynb"))


def test_the_notebooks_exist_without_outputs():
    assert [p.name for p in NOTEBOOKS] == [
        "expert_coding.ipynb",
        "group_comparison.ipynb",
        "new_cohort.ipynb",
        "quickstart.ipynb",
    ]
    for path in NOTEBOOKS:
        nb = nbformat.read(path, as_version=4)
        nbformat.validate(nb)
        for cell in nb.cells:
            if cell.cell_type == "code":
                assert cell.outputs == [] and cell.execution_count is None, path.name


@pytest.mark.slow
@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_runs_twice_in_a_row_without_errors(path, tmp_path):
    # Twice in the same folder, as a person runs it again: the first run's workspace (and its
    # journal of edits) must not stop the second.
    nbclient = pytest.importorskip("nbclient")
    folder = tmp_path / "notebooks"
    folder.mkdir()
    (tmp_path / "example_sessions").symlink_to(ROOT / "example_sessions")
    shutil.copy(path, folder / path.name)
    for _ in range(2):
        nb = nbformat.read(folder / path.name, as_version=4)
        client = nbclient.NotebookClient(
            nb, timeout=600, kernel_name="python3", resources={"metadata": {"path": str(folder)}}
        )
        client.execute()  # raises CellExecutionError, with the cell and traceback, on any error
        for cell in nb.cells:
            for output in cell.get("outputs", []):
                assert output.get("output_type") != "error", output
                data = output.get("data", {}).get("text/plain", "")
                assert "Traceback" not in str(output.get("text", "")) + str(data)
