"""The run lock: one process per run at a time; its file stays beside a run that can be resumed
and goes when the run completes."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from lineproof.errors import InputError
from lineproof.runner import LOCK_NAME, _run_lock

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX advisory locks")


def test_a_held_run_cannot_be_taken_and_its_lock_stays_unless_it_completed(tmp_path: Path) -> None:
    folder = tmp_path / "runs" / "run-x"
    with _run_lock(folder):
        # flock locks belong to an open file: a second open, even in this process, is refused.
        with pytest.raises(InputError, match="another lineproof process"), _run_lock(folder):
            pass
    assert (folder / LOCK_NAME).is_file()  # interrupted, halted, failed: resumable, the lock stays
    with _run_lock(folder):
        pass  # released: it can be taken again
    with _run_lock(folder) as held:
        held.finished = True
    assert not (folder / LOCK_NAME).exists()
    with _run_lock(folder) as held:
        with pytest.raises(InputError), _run_lock(folder):
            pass
        held.finished = True
    assert sorted(p.name for p in folder.iterdir()) == []
