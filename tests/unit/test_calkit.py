"""Cal-kit models against an independent model of the same physics, and kit-file errors."""

from __future__ import annotations

import numpy as np
import pytest

from lineproof.calkit import StandardDefinition, ideal_reflection, load_kit, parse_kit
from lineproof.errors import InputError
from lineproof.simulators import physics

F = np.linspace(1e6, 6e9, 601)


def telegrapher(definition: StandardDefinition, z_terminal: np.ndarray | None, z_reference: float) -> np.ndarray:
    """The simulator's own model: a lossy line from the telegrapher's equations (D. M. Pozar,
    Microwave Engineering, 4th ed., §2.1) ended in the terminal impedance."""
    abcd = physics.line(F, definition.offset_impedance_ohm, definition.offset_delay_s, definition.offset_loss_ohm_per_s)
    return physics.terminate_abcd_open(abcd, z_terminal, z_reference)


@pytest.mark.parametrize("z_reference", [50.0, 75.0])
def test_offset_open_matches_telegrapher_model(z_reference: float) -> None:
    c = (55e-15, 250e-27, -20e-36, 1.5e-45)
    open_ = StandardDefinition("open", "open", 45e-12, 0.9e9, z_reference, c)
    cap = c[0] + c[1] * F + c[2] * F**2 + c[3] * F**3
    expected = telegrapher(open_, 1 / (1j * 2 * np.pi * F * cap), z_reference)
    # The AN 1287-11 loss terms are the first-order (low-loss) expansion of the exact line;
    # on a 45 ps offset the two agree to a few parts in a million.
    np.testing.assert_allclose(ideal_reflection(open_, F, z_reference), expected, atol=1e-5)


def test_offset_short_and_mismatched_offset_impedance() -> None:
    short = StandardDefinition("short", "short", 48e-12, 0.9e9, 49.0, (5e-12, 0, 0, 0))
    expected = telegrapher(short, 1j * 2 * np.pi * F * 5e-12, 50.0)
    np.testing.assert_allclose(ideal_reflection(short, F, 50.0), expected, atol=1e-5)


def test_plain_standards() -> None:
    assert np.allclose(ideal_reflection(StandardDefinition("o", "open"), F, 50.0), 1.0)
    assert np.allclose(ideal_reflection(StandardDefinition("s", "short"), F, 50.0), -1.0)
    assert np.allclose(ideal_reflection(StandardDefinition("l", "load"), F, 50.0), 0.0)


def test_shipped_kit_loads_and_says_it_is_illustrative() -> None:
    kit = load_kit("kits/n50-illustrative.toml")
    assert {s.kind for s in kit.standards.values()} == {"open", "short", "load", "thru"}
    assert "illustrative" in kit.note
    assert len(kit.sha256) == 64


@pytest.mark.parametrize(
    ("text", "key"),
    [
        ("[kit]\nname='k'\n", "standards"),
        ("[kit]\nname='k'\n[standards.open]\nkind='opne'\n", "standards.open.kind"),
        ("[kit]\nname='k'\n[standards.open]\nkind='open'\noffset_delay_s=-1e-12\n", "standards.open.offset_delay_s"),
        ("[kit]\nname='k'\n[standards.open]\nkind='open'\ncapacitance='big'\n", "standards.open.capacitance"),
        ("[kit]\nname='k'\n[standards.open]\nkind='open'\ncolour='red'\n", "standards.open.colour"),
        ("kit = [", None),
    ],
)
def test_bad_kits_name_the_key(text: str, key: str | None) -> None:
    with pytest.raises(InputError) as caught:
        parse_kit(text, "my-kit.toml")
    assert "my-kit.toml" in str(caught.value)
    if key:
        assert f"[{key}]" in str(caught.value)


def test_kit_without_a_short_says_so_when_asked() -> None:
    kit = parse_kit("[kit]\nname='k'\n[standards.open]\nkind='open'\n[standards.load]\nkind='load'\n", "k.toml")
    with pytest.raises(InputError, match="no short standard"):
        kit.standard("short")


@pytest.mark.parametrize("z_reference", [50.0, 75.0])
def test_thru_matches_telegrapher_line(z_reference: float) -> None:
    # A lossy 60-ohm line between two z_reference ports: the AN 1287-11 line against the
    # simulator's telegrapher's-equation ABCD (Pozar Table 4.1) converted with Pozar Table 4.2.
    from lineproof.calkit import thru_s

    definition = StandardDefinition("line", "thru", 120e-12, 2.0e9, 60.0)
    expected = physics.abcd_to_s(physics.line(F, 60.0, 120e-12, 2.0e9), z_reference)
    np.testing.assert_allclose(thru_s(definition, F, z_reference), expected, atol=2e-5)


def test_modelled_load_is_the_parasitic_resistor() -> None:
    kit = parse_kit("[kit]\nname='k'\n[standards.load]\nkind='load'\nload_resistance_ohm=50.5\n"
                    "load_inductance_h=0.1e-9\nload_capacitance_f=0.05e-12\n", "k.toml")
    w = 2 * np.pi * F
    z = 1 / (1 / (50.5 + 1j * w * 0.1e-9) + 1j * w * 0.05e-12)
    np.testing.assert_allclose(kit.ideal("load", F), physics.load_reflection(z), atol=1e-14)


def test_touchstone_standard_is_used_and_interpolated(tmp_path) -> None:
    import skrf

    grid = np.linspace(1e6, 6e9, 2001)
    data = 0.999 * np.exp(-2j * np.pi * grid * 2 * 30e-12)
    skrf.Network(frequency=skrf.Frequency.from_f(grid, unit="Hz"), s=data, z0=50).write_touchstone(
        str(tmp_path / "open-data"))
    text = ("[kit]\nname='k'\n[standards.open]\nkind='open'\ntouchstone='open-data.s1p'\n"
            "[standards.short]\nkind='short'\n[standards.load]\nkind='load'\n")
    (tmp_path / "k.toml").write_text(text)
    kit = load_kit(tmp_path / "k.toml")
    np.testing.assert_allclose(kit.ideal("open", grid), data, atol=1e-12)
    np.testing.assert_allclose(kit.ideal("open", F), 0.999 * np.exp(-2j * np.pi * F * 60e-12), atol=1e-6)
    with pytest.raises(InputError, match=r"k.toml:5 \[standards.open.touchstone\].*leaves the known span"):
        kit.ideal("open", np.linspace(1e6, 7e9, 11))


@pytest.mark.parametrize(("text", "key", "words"), [
    ("[kit]\nname='k'\n[standards.open]\nkind='open'\ntouchstone='x.s1p'\noffset_delay_s=1e-12\n",
     "standards.open.offset_delay_s", "either a model or Touchstone"),
    ("[kit]\nname='k'\n[standards.open]\nkind='open'\ntouchstone='missing.s1p'\n",
     "standards.open.touchstone", "cannot read"),
    ("[kit]\nname='k'\n[standards.open]\nkind='open'\nload_resistance_ohm=50\n",
     "standards.open.load_resistance_ohm", "only a load"),
    ("[kit]\nname='k'\n[standards.load]\nkind='load'\n[uncertainty]\nload_return_loss=40\n",
     "uncertainty.load_return_loss", "unknown key"),
    ("[kit]\nname='k'\n[standards.load]\nkind='load'\n[uncertainty]\nload_return_loss_db=40\n"
     "load_return_loss_best_db=30\n", "uncertainty.load_return_loss_best_db", "below the worst"),
    ("[kit]\nname='k'\n[standards.load]\nkind='load'\n[uncertainty]\nopen_phase_deg=-1\n",
     "uncertainty.open_phase_deg", "cannot be negative"),
])
def test_more_bad_kits_name_key_and_fix(tmp_path, text: str, key: str, words: str) -> None:
    (tmp_path / "bad.toml").write_text(text)
    with pytest.raises(InputError, match=words) as caught:
        load_kit(tmp_path / "bad.toml")
    assert f"[{key}]" in str(caught.value) and "bad.toml" in str(caught.value)


def test_kit_without_a_thru_says_so_for_a_two_port_calibration() -> None:
    kit = parse_kit("[kit]\nname='k'\n[standards.open]\nkind='open'\n", "k.toml")
    with pytest.raises(InputError, match=r"k.toml:3 \[standards\]: the kit has no thru.*\[standards.thru\]"):
        kit.thru(F)


@pytest.mark.parametrize(("name", "z0"), [("kits/n50-illustrative.toml", 50.0), ("kits/sma50-illustrative.toml", 50.0),
                                          ("kits/n75-illustrative.toml", 75.0)])
def test_shipped_kits_are_complete_and_marked_illustrative(name: str, z0: float) -> None:
    kit = load_kit(name)
    assert kit.reference_impedance_ohm == z0
    assert {s.kind for s in kit.standards.values()} == {"open", "short", "load", "thru"}
    assert "illustrative" in kit.note and "not any manufacturer" in kit.note
    # every model standard is passive: |Γ| <= 1 over the range a kit of this kind serves
    for kind in ("open", "short", "load"):
        assert np.all(np.abs(kit.ideal(kind, F)) <= 1.0 + 1e-12)


def test_a_second_standard_of_one_kind_is_refused_with_both_names_line_and_fix() -> None:
    # Before: the kit loaded and kit.standard("open") silently took whichever open came first.
    text = ("[kit]\nname='k'\n[standards.open]\nkind='open'\n[standards.short]\nkind='short'\n"
            "[standards.open-2]\nkind='open'\noffset_delay_s=30e-12\n[standards.load]\nkind='load'\n")
    with pytest.raises(InputError) as caught:
        parse_kit(text, "two-opens.toml")
    message = str(caught.value)
    assert message.startswith("two-opens.toml:8 [standards.open-2.kind]: a second open standard")
    assert "[standards.open]" in message and "fix: keep one open" in message


@pytest.mark.parametrize(("text", "expected"), [
    # line 6 sets the mistyped kind; line 7 the negative delay; line 1 the [kit] table without a name
    ("[kit]\nname='k'\n\n# a comment\n[standards.open]\nkind='opne'\n", "k.toml:6 [standards.open.kind]"),
    ("[kit]\nname='k'\n[standards.open]\nkind='open'\n\n\noffset_delay_s=-1e-12\n", "k.toml:7 [standards.open.offset_delay_s]"),
    ("[kit]\nconnector='N'\n[standards.open]\nkind='open'\n", "k.toml:1 [kit.name]"),
    ("[kit]\nname='k'\n[standards.load]\nkind='load'\n\n[uncertainty]\nopen_phase_deg=-1\n",
     "k.toml:7 [uncertainty.open_phase_deg]"),
])
def test_kit_errors_carry_the_line_of_their_key(text: str, expected: str) -> None:
    with pytest.raises(InputError) as caught:
        parse_kit(text, "k.toml")
    assert str(caught.value).startswith(expected + ":")


def test_a_missing_standard_asked_of_a_loaded_kit_names_the_standards_line() -> None:
    kit = parse_kit("[kit]\nname='k'\n\n[standards.open]\nkind='open'\n", "k.toml")
    with pytest.raises(InputError, match=r"^k.toml:4 \[standards\]: the kit has no short"):
        kit.standard("short")
