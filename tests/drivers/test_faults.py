"""Every fault the simulated bench injects (PROTOCOLS.md §3) ends either in correct data --
an idempotent query repeated on a fresh link, checked against the hidden truth -- or in a
clear error naming the resource, the command and what was expected.  Never in silent bad data.
"""

from __future__ import annotations

import numpy as np
import pytest
from links import DriverBench

from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.errors import InstrumentError, InstrumentReported, LinkError, ReplyError
from lineproof.values import SweepPlan

PLAN = SweepPlan(100e6, 300e6, 101)
#: Short timeouts keep the suite quick; three attempts per idempotent query.
FAST = {"timing": {"command_timeout_s": 0.4, "retries": 2}}


def _ready(link: DriverBench) -> ProfiledAnalyzer:
    analyzer = link.analyzer(**FAST)
    link.control.connect(1, "TM150-0001", "good-termination")
    analyzer.configure(PLAN)
    return analyzer


def _first_word(analyzer: ProfiledAnalyzer, operation: str) -> str:
    """Text that only this operation's command contains, for a fault's ``match``."""
    return analyzer.profile.operation(operation).send.split()[0]


def _assert_names_everything(error: InstrumentError, link: DriverBench, command_part: str) -> None:
    text = str(error)
    assert link.resource in text and error.resource == link.resource
    assert error.command and command_part in error.command and command_part in text


def test_a_dropped_link_is_reopened_and_the_query_repeated(link: DriverBench) -> None:
    analyzer = _ready(link)
    clean = analyzer.measure(["S11"])["S11"]
    trace_read = _first_word(analyzer, "read_raw")
    link.arm("drop", match=trace_read)
    # Noise is off: the repeated read must agree with the clean one to the last bit.
    np.testing.assert_array_equal(analyzer.measure(["S11"])["S11"], clean)
    repeats = [note for note in analyzer.recoveries if "repeated" in note]
    assert len(repeats) == 1 and trace_read in repeats[0] and len(link.fired()) == 1
    if analyzer.profile.operation("select_parameter"):
        # sent without a reply just before the lost read: sent again on the fresh link first
        assert any(note.startswith("re-sent 1 setting") for note in analyzer.recoveries)


def test_a_link_that_keeps_dropping_is_an_error_after_bounded_retries(link: DriverBench) -> None:
    analyzer = _ready(link)
    trace_read = _first_word(analyzer, "read_raw")
    link.arm("drop", match=trace_read, count=3)
    with pytest.raises(LinkError, match="gave up after 3 attempts") as caught:
        analyzer.measure(["S11"])
    _assert_names_everything(caught.value, link, trace_read)
    assert caught.value.expected
    assert len(link.fired()) == 3


def test_a_non_idempotent_command_is_never_repeated(link: DriverBench) -> None:
    analyzer = _ready(link)
    # The first non-idempotent operation with a reply: the error-queue read over SCPI (it
    # removes the entry), the trigger on a line instrument (it answers when the sweep ends).
    name = next(n for n, op in analyzer.profile.operations.items() if not op.idempotent and op.reply != "none")
    word = _first_word(analyzer, name)
    sweeps = link.sweeps()
    link.arm("drop", match=word)
    with pytest.raises(LinkError, match="not repeated: it is not idempotent") as caught:
        analyzer.measure(["S11"])
    _assert_names_everything(caught.value, link, word)
    assert len(link.fired()) == 1 and link.sweeps() - sweeps == 1


def test_a_stalled_reply_is_waited_out_once(link: DriverBench) -> None:
    analyzer = _ready(link)
    clean = analyzer.measure(["S11"])["S11"]
    trace_read = _first_word(analyzer, "read_raw")
    link.arm("stall", seconds=0.6, match=trace_read)  # longer than the read's timeout
    np.testing.assert_array_equal(analyzer.measure(["S11"])["S11"], clean)
    assert analyzer.recoveries and "timed out" in analyzer.recoveries[0]


def test_an_instrument_that_stays_stalled_is_an_error(link: DriverBench) -> None:
    analyzer = _ready(link)
    trace_read = _first_word(analyzer, "read_raw")
    link.arm("stall", seconds=30, match=trace_read, count=3)  # ended when the bench stops
    with pytest.raises(LinkError, match="timed out") as caught:
        analyzer.measure(["S11"])
    _assert_names_everything(caught.value, link, trace_read)
    assert "gave up after 3 attempts" in str(caught.value) and caught.value.expected


def test_a_truncated_trace_is_never_data(link: DriverBench) -> None:
    analyzer = _ready(link)
    clean = analyzer.measure(["S11"])["S11"]
    trace_read = _first_word(analyzer, "read_raw")
    link.arm("truncate", bytes=7, match=trace_read)
    np.testing.assert_array_equal(analyzer.measure(["S11"])["S11"], clean)  # repeated, whole
    link.arm("truncate", bytes=7, match=trace_read, count=3)
    with pytest.raises(LinkError) as caught:
        analyzer.measure(["S11"])
    _assert_names_everything(caught.value, link, trace_read)
    assert "expected" in str(caught.value)


def test_garbage_is_an_error_and_the_next_exchange_is_clean(link: DriverBench) -> None:
    analyzer = _ready(link)
    clean = analyzer.measure(["S11"])["S11"]
    trace_read = _first_word(analyzer, "read_raw")
    link.arm("garbage", match=trace_read)
    with pytest.raises(ReplyError) as caught:
        analyzer.measure(["S11"])
    _assert_names_everything(caught.value, link, trace_read)
    np.testing.assert_array_equal(analyzer.measure(["S11"])["S11"], clean)
    link.arm("garbage", match=_first_word(analyzer, "identify"))
    with pytest.raises(ReplyError) as caught:
        analyzer.identify()
    _assert_names_everything(caught.value, link, _first_word(analyzer, "identify"))


def test_an_error_entry_names_the_setting_that_caused_it(link: DriverBench) -> None:
    analyzer = link.analyzer(**FAST)
    setting = "set_sweep" if analyzer.profile.operation("set_sweep") else "set_points"
    word = _first_word(analyzer, setting)
    link.arm("error", code=link.kind.error_code, text="value out of range", match=word)
    with pytest.raises(InstrumentReported) as caught:
        analyzer.configure(PLAN)
    error = caught.value
    assert (error.code, error.text) == (link.kind.error_code, "value out of range")
    _assert_names_everything(error, link, word)


def test_a_reset_in_the_middle_of_a_run_is_detected(link: DriverBench) -> None:
    analyzer = _ready(link)
    clean = analyzer.measure(["S11"])["S11"]
    link.arm("reset")  # before the next command the instrument returns to power-on settings
    with pytest.raises(InstrumentError, match="reset") as caught:
        analyzer.measure(["S11"])
    assert caught.value.resource == link.resource and caught.value.command
    with pytest.raises(Exception, match="configure"):
        analyzer.measure(["S11"])
    analyzer.configure(PLAN)
    np.testing.assert_array_equal(analyzer.measure(["S11"])["S11"], clean)


def test_a_link_lost_right_after_a_trigger_stops_the_measurement(visa_link: DriverBench) -> None:
    """Over SCPI the trigger has no reply: when the link is lost at the next query, nobody can
    say whether the sweep ran, so the read that would follow is not made.  (A line
    instrument answers its trigger: see test_a_non_idempotent_command_is_never_repeated.)"""
    link = visa_link
    analyzer = _ready(link)
    trigger = analyzer.profile.operation("trigger")
    link.arm("drop", match=_first_word(analyzer, "wait"))
    with pytest.raises(LinkError, match="may not have arrived") as caught:
        analyzer.measure(["S11"])
    assert caught.value.command == trigger.send and link.resource in str(caught.value)
