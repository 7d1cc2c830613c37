"""Every package folder ships in the wheel under its stable import name."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_every_package_folder_is_listed_in_pyproject() -> None:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    mapping = config["package-dir"]
    listed = set(config["packages"])
    for import_name, folder in mapping.items():
        for init in (ROOT / folder).rglob("__init__.py"):
            relative = init.parent.relative_to(ROOT / folder)
            name = ".".join([import_name, *relative.parts]) if relative.parts else import_name
            assert name in listed, f"{init.parent} holds a package {name} missing from pyproject's packages"


def test_console_command_and_version() -> None:
    import lineproof
    from lineproof.cli import build_parser

    assert lineproof.__version__
    assert build_parser().prog == "lineproof"
