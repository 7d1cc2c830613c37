"""Saved calibrations: round trip, refusals (tampered, replaced, too old, other analyzer,
sweep outside), and interpolation onto another grid judged against the simulator's own
error-term model as the hidden truth."""

from __future__ import annotations

import json
from dataclasses import replace
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from lineproof import calibration, calstore
from lineproof.calkit import load_kit
from lineproof.errors import CalibrationError, InputError
from lineproof.simulators.error_model import PortErrorModel, PortErrorSettings
from lineproof.uncertainty import UncertaintySettings, residual_model
from lineproof.values import InstrumentIdentity, SweepPlan

IDENTITY = InstrumentIdentity("Tarnmoor Instruments", "SIM-R1", "SIM0001", "1.0", "TCPIP::127.0.0.1::1::SOCKET")
MODEL = PortErrorModel(PortErrorSettings(cable_delay_s=2.4e-9), seed=11)


def hidden_terms(f: np.ndarray) -> dict[str, np.ndarray]:
    return MODEL.terms(f).as_dict()


def record(points: int, start: float = 1e6, stop: float = 3e9) -> object:
    plan = SweepPlan(start, stop, points)
    f = plan.frequencies()
    kit = load_kit("kits/n50-illustrative.toml")
    residuals = residual_model(kit, ("open", "short", "load"), f, UncertaintySettings())
    return calibration.make_record(calibration.ONE_PORT_METHOD, hidden_terms(f), f, plan, IDENTITY, kit.name,
                                   kit.sha256, 50.0, residuals, temperature_c=23.5)


def test_round_trip_keeps_everything(tmp_path: Path) -> None:
    original = record(201)
    path = calstore.save_calibration(original, tmp_path)
    loaded = calstore.load_calibration(path)
    for name in ("calibration_id", "method", "kit_name", "kit_hash", "created_utc", "instrument", "plan",
                 "reference_impedance_ohm", "temperature_c", "interpolation_error"):
        assert getattr(loaded, name) == getattr(original, name), name
    np.testing.assert_array_equal(loaded.frequencies_hz, original.frequencies_hz)
    assert set(loaded.terms) == set(original.terms) and set(loaded.residuals) == set(original.residuals)
    for name in original.terms:
        np.testing.assert_array_equal(loaded.terms[name], original.terms[name])
    for name in original.residuals:
        np.testing.assert_array_equal(loaded.residuals[name], original.residuals[name])
    metadata = json.loads(path.read_text())
    assert metadata["kit"]["sha256"] == original.kit_hash and metadata["instrument"]["serial"] == "SIM0001"


def test_a_saved_calibration_is_never_replaced(tmp_path: Path) -> None:
    original = record(51)
    calstore.save_calibration(original, tmp_path)
    with pytest.raises(CalibrationError, match="never replaced"):
        calstore.save_calibration(original, tmp_path)


def test_tampered_or_foreign_files_are_refused(tmp_path: Path) -> None:
    path = calstore.save_calibration(record(51), tmp_path)
    arrays = tmp_path / json.loads(path.read_text())["arrays_file"]
    arrays.write_bytes(arrays.read_bytes()[:-8] + b"12345678")
    with pytest.raises(InputError, match=r"\[arrays_sha256\].*changed or swapped"):
        calstore.load_calibration(path)
    foreign = tmp_path / "foreign.json"
    foreign.write_text('{"format": "something else"}')
    with pytest.raises(InputError, match=r"foreign.json \[format\]"):
        calstore.load_calibration(foreign)


def test_age_limit_and_analyzer_identity() -> None:
    cal = record(51)
    created = datetime.fromisoformat(cal.created_utc)
    calstore.check_age(cal, 3600, now=created + timedelta(minutes=59))
    with pytest.raises(CalibrationError, match=r"2\.0 h old; the limit is 1\.0 h"):
        calstore.check_age(cal, 3600, now=created + timedelta(hours=2))
    with pytest.raises(CalibrationError, match="made on Tarnmoor Instruments SIM-R1 s/n SIM0001"):
        calstore.check_instrument(cal, replace(IDENTITY, serial="SIM0002"))
    prepared = calstore.prepare(cal, IDENTITY, cal.frequencies_hz, now=datetime.now(UTC))
    assert prepared is cal


def test_a_sweep_outside_the_calibration_is_refused() -> None:
    cal = record(401, 100e6, 1e9)
    with pytest.raises(CalibrationError, match=r"falls outside calibration .*never extrapolated"):
        calstore.fit_to_sweep(cal, np.linspace(50e6, 500e6, 101))


def test_interpolated_calibration_is_flagged_and_within_its_own_estimate() -> None:
    cal = record(801)
    f = np.linspace(10e6, 2.5e9, 3001)  # inside the span, on other frequencies
    moved = calstore.fit_to_sweep(cal, f, tolerance=1e-3)
    assert moved.interpolation_error is not None and 0 < moved.interpolation_error <= 1e-3
    assert moved.calibration_id == cal.calibration_id and moved.plan == cal.plan
    # Truth: reflections measured through the hidden terms on the new grid.
    rng = np.random.default_rng(3)
    gamma = rng.uniform(0, 1, f.size) * np.exp(1j * rng.uniform(0, 2 * np.pi, f.size))
    true = hidden_terms(f)
    raw = calibration.embed_reflection(true["directivity"], true["source_match"], true["reflection_tracking"], gamma)
    error = np.max(np.abs(calibration.correct_one_port(moved, f, raw) - gamma))
    assert error <= moved.interpolation_error
    assert moved.residuals["port1.variance"].shape == (f.size, 3, 3)


def test_interpolation_above_the_tolerance_is_refused() -> None:
    # A 101-point calibration over 3 GHz with 2.4 ns of cable is too coarse for 1e-4.
    with pytest.raises(CalibrationError, match=r"estimated error of .* above the tolerance 0\.0001.*more points"):
        calstore.fit_to_sweep(record(101), np.linspace(1e6, 3e9, 10001), tolerance=1e-4)
