"""Touchstone writing: scikit-rf reads our files back with every metadata line intact."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import skrf

from lineproof.errors import InputError
from lineproof.touchstone import check_serial, format_one_port, read_metadata, write_new_file

TRICKY = [
    ("port.1", "input"),               # a line starting with 'Port' would be taken as a port name
    ("gamma.note", "Gamma 0.1 0.2"),   # one starting with 'Gamma' as HFSS port data
    ("analyzer.resource", "TCPIP::127.0.0.1::5025::SOCKET"),
    ("empty", ""),
    ("text", "two  spaces and ! bang"),
    ("switch.route", "(@1!3,2!7)"),     # SCPI channel lists hold a bang
]


def test_metadata_survives_scikit_rf(tmp_path: Path) -> None:
    f = np.linspace(1e8, 5e8, 5)
    gamma = np.array([0.1 + 0.2j, -0.3j, 0.01, 0.5 - 0.5j, 0])
    path = write_new_file(tmp_path, "TM150-0001", ".s1p", format_one_port(f, gamma, 50.0, TRICKY))
    network = skrf.Network(str(path))
    np.testing.assert_allclose(network.s[:, 0, 0], gamma, atol=1e-12)
    np.testing.assert_allclose(network.f, f)
    metadata = read_metadata(network.comments)
    assert metadata["port.1"] == "input"
    assert metadata["gamma.note"] == "Gamma 0.1 0.2"
    assert metadata["analyzer.resource"] == "TCPIP::127.0.0.1::5025::SOCKET"
    assert metadata["empty"] == ""
    assert metadata["text"] == "two spaces and ! bang"
    assert metadata["switch.route"] == "(@1!3,2!7)"


def test_never_overwrites_and_leaves_no_partial_files(tmp_path: Path) -> None:
    first = write_new_file(tmp_path, "X1", ".s1p", "a")
    second = write_new_file(tmp_path, "X1", ".s1p", "b")
    assert first.name == "X1.s1p" and second.name == "X1~2.s1p"
    assert first.read_text() == "a" and second.read_text() == "b"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["X1.s1p", "X1~2.s1p"]


@pytest.mark.parametrize("serial", ["../../x", "a/b", ".hidden", "", "x" * 300, "A..B", "sp ace", "tab\t"])
def test_unsafe_serials_are_refused(serial: str) -> None:
    with pytest.raises(InputError, match="not allowed"):
        check_serial(serial)


@pytest.mark.parametrize("serial", ["TM150-0001", "a", "SN_12.3-b"])
def test_ordinary_serials_pass(serial: str) -> None:
    assert check_serial(serial) == serial


def test_metadata_keys_are_checked() -> None:
    with pytest.raises(ValueError):
        format_one_port(np.array([1e8]), np.array([0j]), 50.0, [("Bad Key", "x")])


def test_without_hard_links_a_file_is_still_never_replaced(tmp_path: Path, monkeypatch) -> None:  # noqa: ANN001
    import os

    def no_links(source: str, target: object) -> None:
        raise PermissionError("this file system has no hard links")

    monkeypatch.setattr(os, "link", no_links)
    first = write_new_file(tmp_path, "X1", ".s1p", "a")
    second = write_new_file(tmp_path, "X1", ".s1p", "b")
    assert (first.name, second.name) == ("X1.s1p", "X1~2.s1p")
    assert first.read_text() == "a" and second.read_text() == "b"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["X1.s1p", "X1~2.s1p"]
