"""Where a stop request (Ctrl-C) ends a run: before anything that measures or waits for a person;
what measures nothing and needs nobody still finishes the run."""

from __future__ import annotations

import pytest

from lineproof.run_steps import stop_comes_before
from lineproof.sequence import ACTIONS


@pytest.mark.parametrize("action", ["calibrate", "qualify-termination", "verify", "measure-batch",
                                    "repeatability-study"])
def test_a_step_that_measures_is_never_begun_after_a_stop(action: str) -> None:
    assert stop_comes_before(action, attended=False) and stop_comes_before(action, attended=True)


def test_prompts_wait_for_a_person_and_the_rest_finishes() -> None:
    # On an attended station a route or a message is a prompt: the person may have gone.
    assert stop_comes_before("route", attended=True) and stop_comes_before("message", attended=True)
    assert not stop_comes_before("route", attended=False)  # a switch: moments
    assert not stop_comes_before("message", attended=False)  # a note in the log
    assert not stop_comes_before("identify", attended=True) and not stop_comes_before("identify", attended=False)


def test_every_action_is_decided() -> None:
    # A new action must be placed on one side deliberately: this lists the ones that finish a run.
    finishing = {a for a in ACTIONS if not stop_comes_before(a, attended=False)}
    assert finishing == {"identify", "message", "route"}
