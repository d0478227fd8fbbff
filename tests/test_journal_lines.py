"""Journal errors name the file and the 1-based line of the offending record."""

import json

import pytest

from ethoscribe.curation import Curation
from ethoscribe.errors import InputError
from ethoscribe.workspace.files import read_journal_lines


def test_read_journal_lines_numbers_kept_records_and_reports_skipped(tmp_path):
    path = tmp_path / "journal.jsonl"
    lines = [
        json.dumps({"op": "start", "names": {"0": "a", "1": "b"}}),
        "",
        "garbage {",
        json.dumps({"op": "rename", "motif": "a", "name": "c"}),
    ]
    path.write_text("\n".join(lines) + "\n")
    records, problems, numbers = read_journal_lines(path)
    assert numbers == [1, 4]
    assert [r["op"] for r in records] == ["start", "rename"]
    assert problems == [f"{path}: line 3 is incomplete or damaged and was skipped"]


def test_replay_error_names_the_line():
    records = [
        {"op": "start", "names": {"0": "a", "1": "b"}},
        {"op": "rename", "motif": "nope", "name": "c"},
    ]
    with pytest.raises(InputError, match=r"journal\.jsonl: line 7 \('rename'\)"):
        Curation.from_journal(records, where=["journal.jsonl: line 2", "journal.jsonl: line 7"])
    with pytest.raises(InputError, match=r"journal record 1 \('rename'\)"):
        Curation.from_journal(records)
