"""A 75-ohm system, held against truth that lineproof's own formulas do not compute.

The standards as they actually are come from the simulator's own reading of the 75-ohm kit
file (``scenario.actual_standards``: telegrapher's-equation lines ended in their terminal
impedances, referred to the kit's 75 ohm), the devices from the simulator's ABCD physics
referred to 75 ohm (and, as a second opinion, from scikit-rf media with ``z0_port`` and
``z0`` both 75), and the raw data from the simulator's signal-flow graph of an analyzer's
error terms.  Only the calibration itself -- the kit's model standards at the kit's
impedance, the solve and the correction -- is lineproof's.  A calibration that took the
kit's standards against 50 ohm is shown wrong here by a quarter in |Γ|.

Sources for the physics: D. M. Pozar, *Microwave Engineering*, 4th ed., Tables 4.1 and 4.2
(ABCD of series, shunt and line elements; ABCD to S for a real reference impedance Z0), as
the simulator's ``physics`` module cites them.
"""

from __future__ import annotations

from collections.abc import Iterator
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
import skrf
from scipy.constants import speed_of_light

from lineproof import calibration, two_port
from lineproof.calkit import CalKit, ideal_reflection, load_kit, thru_s
from lineproof.simulators import physics
from lineproof.simulators.error_model import AnalyzerErrorModel, DirectionTerms
from lineproof.simulators.scenario import actual_standards
from lineproof.values import InstrumentIdentity, SweepPlan

Z0 = 75.0
PLAN = SweepPlan(1e6, 3e9, 301)
F = PLAN.frequencies()
IDENTITY = InstrumentIdentity("Test", "Model", "0", "0")
KIT_NAME = "kits/n75-illustrative.toml"
REFLECTS = ("open", "short", "load")
#: How far the kit's AN 1287-11 offset model (a low-loss approximation) may be from the
#: simulator's telegrapher's-equation lines once corrected (measured here: about 1e-6).
MODEL_AGREEMENT = 1e-5
#: How wrong a calibration that took the 75-ohm standards against 50 ohm must at least be
#: for this test to count as telling the two apart (measured here: 0.13 with only the line
#: thru slipped, 0.25 and more otherwise).
FIFTY_OHM_SLIP = 0.1


@pytest.fixture(scope="module")
def kit_path() -> Iterator[Path]:
    with resources.as_file(resources.files("lineproof.sequences") / KIT_NAME) as path:
        yield path


def device_abcd() -> np.ndarray:
    """A series 20 nH, a shunt 4 pF and 150 ps of lossless 75-ohm line (Pozar Table 4.1)."""
    w = 2 * np.pi * F
    return physics.cascade(physics.series_impedance(1j * w * 20e-9), physics.shunt_admittance(1j * w * 4e-12),
                           physics.line(F, 75.0, 150e-12))


def device_by_scikit_rf() -> skrf.Network:
    """The same device from scikit-rf's media, its ports and line both at 75 ohm (built with
    ``z0_port`` set: without it scikit-rf would give the line 75-ohm ports of its own)."""
    frequency = skrf.Frequency.from_f(F, unit="Hz")
    # gamma = jω/c: a lossless air line (scikit-rf's default gamma is a constant 1j per metre)
    media = skrf.media.DefinedGammaZ0(frequency, z0_port=Z0, z0=Z0, gamma=2j * np.pi * F / speed_of_light)
    return media.inductor(20e-9) ** media.shunt_capacitor(4e-12) ** media.line(150e-12 * speed_of_light, unit="m")


def one_port_record(terms: dict[str, np.ndarray], kit: CalKit) -> object:
    return calibration.make_record(calibration.ONE_PORT_METHOD, terms, F, PLAN, IDENTITY, kit.name, kit.sha256,
                                   kit.reference_impedance_ohm)


def test_the_devices_truth_is_the_same_from_both_independent_models() -> None:
    # The simulator's ABCD physics and scikit-rf agree on the 75-ohm device, and its 75-ohm
    # reflection is far from its 50-ohm one: a slip of reference would show.
    by_physics = physics.abcd_to_s(device_abcd(), Z0)
    np.testing.assert_allclose(by_physics, device_by_scikit_rf().s, atol=1e-12)
    assert np.max(np.abs(physics.abcd_to_s(device_abcd(), 50.0)[:, 0, 0] - by_physics[:, 0, 0])) > 0.2


def test_one_port_calibration_with_the_75_ohm_kit_gives_the_75_ohm_reflection(kit_path: Path) -> None:
    kit = load_kit(KIT_NAME)
    assert kit.reference_impedance_ohm == Z0
    actual = actual_standards(kit_path, 0.0, seed=1)  # the kit's standards exactly as defined
    analyzer = AnalyzerErrorModel("reflection", [], seed=3).terms(F)["forward"]
    raw = {kind: analyzer.measure_reflection(actual[kind].response(F)) for kind in REFLECTS}
    # the device ended in 120 ohm, its input reflection referred to 75 ohm (Pozar: Zin = (A Z + B) / (C Z + D))
    truth = physics.terminate_abcd_open(device_abcd(), np.full(F.shape, 120.0 + 0j), Z0)
    raw_device = analyzer.measure_reflection(truth)

    ideals = {kind: kit.ideal(kind, F) for kind in REFLECTS}
    cal = one_port_record(calibration.solve_one_port(F, raw, ideals), kit)
    np.testing.assert_allclose(calibration.correct_one_port(cal, F, raw_device), truth, atol=MODEL_AGREEMENT)

    # The same standards taken against 50 ohm (the slip this test is here to catch).
    fifty = {kind: ideal_reflection(kit.standard(kind), F, 50.0) for kind in REFLECTS}
    wrong = calibration.correct_one_port(one_port_record(calibration.solve_one_port(F, raw, fifty), kit), F, raw_device)
    assert np.max(np.abs(wrong - truth)) > FIFTY_OHM_SLIP


def line_thru_kit(tmp_path: Path, kit_path: Path) -> Path:
    """The 75-ohm kit with 80 ps of lossy 75-ohm line as its thru (an adapter thru), so that
    the thru's own reference impedance matters (a flush thru is the same in any Z0)."""
    text = kit_path.read_text(encoding="utf-8")
    flush = '[standards.thru]\nkind = "thru"\noffset_delay_s = 0.0\n'
    assert flush in text, f"{KIT_NAME} no longer has the flush thru this test rewrites"
    path = tmp_path / "n75-line-thru.toml"
    path.write_text(text.replace(flush, '[standards.thru]\nkind = "thru"\noffset_delay_s = 80.0e-12\n'
                                        'offset_loss_ohm_per_s = 1.1e9\n'), encoding="utf-8")
    return path


def measure_full(terms: dict[str, DirectionTerms], network: np.ndarray) -> np.ndarray:
    """Raw S (N, 2, 2) of a full two-port analyzer, as the simulator sweeps it: forward with
    the network as it is, reverse with it turned round."""
    s11, s21 = terms["forward"].measure(network)
    s22, s12 = terms["reverse"].measure(physics.reverse_s(network))
    return two_port.s_matrix(s11, s21, s12, s22)


def solt(thru_model: np.ndarray, reflect_models: dict[str, np.ndarray],
         analyzer: dict[str, DirectionTerms], actual: dict[str, np.ndarray], actual_thru: np.ndarray) -> dict[str, np.ndarray]:
    raw = {kind: measure_full(analyzer, physics.diagonal_s(actual[kind], actual[kind])) for kind in REFLECTS}
    loads = measure_full(analyzer, physics.diagonal_s(actual["load"], actual["load"]))
    return two_port.solve_solt(F, {k: m[:, 0, 0] for k, m in raw.items()}, {k: m[:, 1, 1] for k, m in raw.items()},
                               reflect_models, measure_full(analyzer, actual_thru), thru_model, loads)


@pytest.mark.parametrize("thru", ["flush", "line"])
def test_solt_with_the_75_ohm_kit_gives_the_75_ohm_s_parameters(thru: str, kit_path: Path, tmp_path: Path) -> None:
    path = kit_path if thru == "flush" else line_thru_kit(tmp_path, kit_path)
    kit = load_kit(path)
    actual = {kind: standard.response(F) for kind, standard in actual_standards(path, 0.0, seed=1).items()
              if kind in REFLECTS}
    # The actual thru from the telegrapher's line between 75-ohm ports (Pozar Tables 4.1, 4.2).
    thru_definition = kit.standard("thru")
    actual_thru = physics.abcd_to_s(physics.line(F, Z0, thru_definition.offset_delay_s,
                                                 thru_definition.offset_loss_ohm_per_s), Z0)
    analyzer = AnalyzerErrorModel("full", [], seed=5).terms(F)
    truth = physics.abcd_to_s(device_abcd(), Z0)
    raw_device = measure_full(analyzer, truth)

    terms = solt(kit.thru(F), {kind: kit.ideal(kind, F) for kind in REFLECTS}, analyzer, actual, actual_thru)
    cal = calibration.make_record(calibration.FULL_TWO_PORT_METHOD, terms, F, PLAN, IDENTITY, kit.name, kit.sha256, Z0)
    np.testing.assert_allclose(two_port.correct_two_port(cal, F, raw_device), truth, atol=MODEL_AGREEMENT)

    # The kit's standards taken against 50 ohm: reflects (and the line thru) referred wrongly.
    fifty_thru = thru_s(thru_definition, F, 50.0)
    fifty = {kind: ideal_reflection(kit.standard(kind), F, 50.0) for kind in REFLECTS}
    wrong_terms = solt(fifty_thru, fifty, analyzer, actual, actual_thru)
    wrong = two_port.correct_two_port(calibration.make_record(calibration.FULL_TWO_PORT_METHOD, wrong_terms, F, PLAN,
                                                              IDENTITY, kit.name, kit.sha256, Z0), F, raw_device)
    assert np.max(np.abs(wrong - truth)) > FIFTY_OHM_SLIP
    if thru == "line":
        # the thru alone taken against 50 ohm, the reflects right: still wrong by a clear margin
        thru_only = solt(fifty_thru, {kind: kit.ideal(kind, F) for kind in REFLECTS}, analyzer, actual, actual_thru)
        wrong = two_port.correct_two_port(calibration.make_record(calibration.FULL_TWO_PORT_METHOD, thru_only, F,
                                                                  PLAN, IDENTITY, kit.name, kit.sha256, Z0), F, raw_device)
        assert np.max(np.abs(wrong - truth)) > FIFTY_OHM_SLIP

