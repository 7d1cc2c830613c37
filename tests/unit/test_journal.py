"""The run journal survives a kill mid-line; a run folder is tidied before a run resumes."""

from __future__ import annotations

import json
from pathlib import Path

from lineproof.journal import JOURNAL_NAME, RunJournal, read_journal
from lineproof.recording import SET_ASIDE, RunFolder
from lineproof.touchstone import write_new_file


def test_a_torn_last_line_is_noticed_and_cut_before_appending(tmp_path: Path) -> None:
    journal = RunJournal(tmp_path)
    journal.write("run-started", run_id="r1")
    journal.write("device-committed", serial="A1", position=1)
    journal.close()
    path = tmp_path / JOURNAL_NAME
    with open(path, "ab") as stream:
        stream.write(b'{"event": "device-committed", "ser')  # the kill came mid-write
    state = read_journal(path)
    assert state.torn_tail and [e["event"] for e in state.events] == ["run-started", "device-committed"]
    assert state.committed_serials() == ["A1"]
    journal = RunJournal(tmp_path)
    journal.write("resumed", attempt=1)
    journal.close()
    lines = path.read_bytes().split(b"\n")
    assert lines[-1] == b"" and all(json.loads(line) for line in lines[:-1])
    assert [e["event"] for e in read_journal(path).events] == ["run-started", "device-committed", "resumed"]
    assert not read_journal(path).torn_tail


def test_a_missing_journal_reads_as_empty(tmp_path: Path) -> None:
    state = read_journal(tmp_path / JOURNAL_NAME)
    assert state.events == [] and state.steps_done() == set() and not state.torn_tail


def test_tidying_removes_temporaries_and_sets_aside_uncommitted_results(tmp_path: Path) -> None:
    folder = RunFolder(tmp_path, "run-x")
    committed = write_new_file(folder.path, "A1", ".s1p", "committed\n")
    orphan = write_new_file(folder.path, "A2", ".s1p", "written, never committed\n")
    (folder.path / ".partial-abc.s1p").write_text("half")
    (folder.path / "sequence.toml").write_text("kept")
    moved = folder.tidy({committed.name})
    assert moved == [orphan.name]
    assert sorted(p.name for p in folder.path.iterdir()) == ["A1.s1p", "sequence.toml", SET_ASIDE]
    assert (folder.path / SET_ASIDE / "A2.s1p").read_text() == "written, never committed\n"
    # A second orphan of the same name is set aside beside the first, not over it.
    write_new_file(folder.path, "A2", ".s1p", "again\n")
    folder.tidy({committed.name})
    assert sorted(p.name for p in (folder.path / SET_ASIDE).iterdir()) == ["A2.s1p", "A2~2.s1p"]
