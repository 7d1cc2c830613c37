"""De-embedding adapters: lines against scikit-rf's media (with the port impedance set, the
trap noted in DEVELOPERS.md), removal against scikit-rf's cascading, and Touchstone adapters."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import skrf

from lineproof import deembed
from lineproof.errors import InputError

F = np.linspace(10e6, 3e9, 301)
FREQUENCY = skrf.Frequency.from_f(F, unit="Hz")


def random_device(seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.uniform(0, 0.9, (F.size, 2, 2)) * np.exp(1j * rng.uniform(0, 2 * np.pi, (F.size, 2, 2)))


@pytest.mark.parametrize(("z_system", "z_line"), [(50.0, 50.0), (50.0, 65.0), (75.0, 75.0)])
def test_lossless_line_matches_scikit_rf_media(z_system: float, z_line: float) -> None:
    # scikit-rf's media must be told the port impedance (z0_port); without it a 65-ohm line
    # gets 65-ohm ports and cascading renormalises silently.
    delay = 250e-12
    media = skrf.media.DefinedGammaZ0(FREQUENCY, z0_port=z_system, z0=z_line, gamma=1j * 2 * np.pi * F / 3e8)
    expected = media.line(delay * 3e8, unit="m").s
    adapter = deembed.adapter_from_line(F, delay, z_system, impedance_ohm=z_line)
    np.testing.assert_allclose(adapter.s, expected, atol=1e-12)


def test_line_loss_is_the_stated_insertion_loss_at_1_ghz() -> None:
    adapter = deembed.adapter_from_line(np.array([0.25e9, 1e9, 4e9]), 500e-12, 50.0, loss_db_at_1ghz=0.2)
    loss = -20 * np.log10(np.abs(adapter.s[:, 1, 0]))
    # grows as sqrt(f); the lossy line's complex impedance adds a little mismatch loss, most at
    # low frequency (AN 1287-11: Zc = Z0 + (1 - j) loss / (2ω) sqrt(f / 1 GHz))
    np.testing.assert_allclose(loss, [0.1, 0.2, 0.4], atol=1e-3)


def test_removing_adapters_matches_scikit_rf_cascading() -> None:
    device = random_device(1)
    a = deembed.Adapter("in", F, random_device(2))
    b = deembed.Adapter("out", F, random_device(3))
    net = lambda s: skrf.Network(frequency=FREQUENCY, s=s)  # noqa: E731
    # b is given port 1 at the analyzer: in the cascade its port 2 faces the device
    measured = (net(a.s) ** net(device) ** net(b.s).flipped()).s
    np.testing.assert_allclose(deembed.add_to_two_port(device, a, b), measured, atol=1e-10)
    np.testing.assert_allclose(deembed.remove_from_two_port(F, measured, a, b), device, atol=1e-9)
    reference = (net(a.s).inv ** net(measured) ** net(b.s).flipped().inv).s
    np.testing.assert_allclose(deembed.remove_from_two_port(F, measured, a, b), reference, atol=1e-9)


def test_removing_an_adapter_from_a_reflection() -> None:
    adapter = deembed.adapter_from_line(F, 180e-12, 50.0, loss_db_at_1ghz=0.05, impedance_ohm=52.0)
    gamma = 0.3 * np.exp(1j * F / 3e8)
    seen = (skrf.Network(frequency=FREQUENCY, s=adapter.s) ** skrf.Network(frequency=FREQUENCY, s=gamma)).s[:, 0, 0]
    np.testing.assert_allclose(deembed.remove_from_reflection(adapter, F, seen), gamma, atol=1e-12)


def test_touchstone_adapter(tmp_path: Path) -> None:
    grid = np.linspace(1e6, 6e9, 3001)
    line = deembed.adapter_from_line(grid, 100e-12, 50.0, loss_db_at_1ghz=0.03)
    skrf.Network(frequency=skrf.Frequency.from_f(grid, unit="Hz"), s=line.s, z0=50).write_touchstone(
        str(tmp_path / "barrel"))
    adapter = deembed.adapter_from_touchstone(tmp_path / "barrel.s2p", F, 50.0)
    np.testing.assert_allclose(adapter.s, deembed.adapter_from_line(F, 100e-12, 50.0, loss_db_at_1ghz=0.03).s,
                               atol=1e-6)
    with pytest.raises(InputError, match="leaves the known span"):
        deembed.adapter_from_touchstone(tmp_path / "barrel.s2p", np.linspace(1e6, 7e9, 11), 50.0)
    with pytest.raises(InputError, match="cannot read"):
        deembed.adapter_from_touchstone(tmp_path / "missing.s2p", F, 50.0)


def test_delay_from_length() -> None:
    # 1 m of solid-polyethylene cable (velocity factor 0.66): 1 / (0.66 c) = 5.054 ns
    assert deembed.delay_from_length(1.0, 0.66) == pytest.approx(5.0541e-9, rel=1e-4)
    with pytest.raises(ValueError):
        deembed.delay_from_length(1.0, 1.5)


def test_touchstone_adapter_referred_to_another_impedance_is_renormalised(tmp_path: Path) -> None:
    # 150 ps of 60-ohm line as scikit-rf's media gives it between 75-ohm ports, written to a
    # file (its option line says R 75) and read into a 50-ohm system: it must be the same line
    # as scikit-rf's media gives it between 50-ohm ports (scikit-rf as the reference library).
    grid = np.linspace(1e6, 6e9, 3001)
    length = 150e-12 * 3e8

    def line(frequency: skrf.Frequency, z_ports: float) -> skrf.Network:
        media = skrf.media.DefinedGammaZ0(frequency, z0_port=z_ports, z0=60.0,
                                          gamma=1j * 2 * np.pi * frequency.f / 3e8)
        return media.line(length, unit="m")

    line(skrf.Frequency.from_f(grid, unit="Hz"), 75.0).write_touchstone(str(tmp_path / "line75"))
    assert skrf.Network(str(tmp_path / "line75.s2p")).z0[0, 0] == 75.0
    adapter = deembed.adapter_from_touchstone(tmp_path / "line75.s2p", F, 50.0)
    at_50 = line(FREQUENCY, 50.0).s
    np.testing.assert_allclose(adapter.s, at_50, atol=1e-6)
    # the 75-ohm numbers taken as they stand would be another adapter altogether
    assert np.max(np.abs(line(FREQUENCY, 75.0).s - at_50)) > 0.1
