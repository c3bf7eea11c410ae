"""The installed package must carry every subpackage and the migrations (``fitwatch init`` from a
wheel). Building a wheel needs the network, so that check is manual (see the store report); these
guard the configuration it relies on."""

from __future__ import annotations

import tomllib
from pathlib import Path

from monitor.store.engine import migrations_path

ROOT = Path(__file__).resolve().parents[2]


def test_every_subpackage_is_listed_for_setuptools() -> None:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    listed = set(config["tool"]["setuptools"]["packages"])
    found = {".".join(p.relative_to(ROOT).parts) for p in (ROOT / "monitor").rglob("*")
             if p.is_dir() and p.name != "__pycache__" and any(p.glob("*.py"))}
    missing = sorted((found | {"monitor"}) - listed)
    assert not missing, f"add {missing} to [tool.setuptools] packages in pyproject.toml"
    assert config["tool"]["setuptools"]["package-dir"]["monitor.migrations"] == "migrations"


def test_migrations_are_found_beside_the_package() -> None:
    path = migrations_path()
    assert (path / "env.py").is_file() and (path / "script.py.mako").is_file()
    assert any((path / "versions").glob("0001_*.py"))
