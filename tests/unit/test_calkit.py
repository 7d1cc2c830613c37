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
