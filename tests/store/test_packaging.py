"""The installed package must carry its migrations and data files (``fitwatch init`` from a
wheel). Building a wheel needs the network, so that check is manual; these guard what it relies on:
Alembic finds the scripts as a package resource, and every file the code opens at run time is
declared as package data."""

from __future__ import annotations

import tomllib
from fnmatch import fnmatch
from importlib import resources
from pathlib import Path

from alembic.script import ScriptDirectory

from monitor.migrations import HEAD_REVISION
from monitor.store.migrate import SCRIPT_LOCATION, alembic_config

ROOT = Path(__file__).resolve().parents[2]


def test_alembic_finds_the_migrations_as_a_package_resource() -> None:
    assert SCRIPT_LOCATION == "monitor:migrations"
    scripts = ScriptDirectory.from_config(alembic_config())
    folder = resources.files("monitor") / "migrations"
    assert (folder / "env.py").is_file() and (folder / "script.py.mako").is_file()
    # every revision file in the package, found through the resource, as one chain from base
    files = sorted(p.name.split("_")[0] for p in (folder / "versions").iterdir()
                   if p.name.endswith(".py") and p.name[0].isdigit())
    chain = [script.revision for script in scripts.walk_revisions()][::-1]
    assert files and chain == files
    assert scripts.get_revision(chain[0]).down_revision is None
    assert scripts.get_heads() == [chain[-1]]
    # the constant everyday commands compare with (they never load Alembic) is that head
    assert chain[-1] == HEAD_REVISION


def test_every_non_python_file_of_the_package_is_declared_as_package_data() -> None:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    patterns = config["tool"]["setuptools"]["package-data"]["monitor"]
    package = ROOT / "monitor"
    undeclared = []
    for path in package.rglob("*"):
        if not path.is_file() or "__pycache__" in path.parts or path.suffix == ".pyc":
            continue
        relative = path.relative_to(package).as_posix()
        in_a_package = (path.parent / "__init__.py").is_file()
        if path.suffix == ".py" and in_a_package:
            continue  # a module: packages.find takes it
        if not any(fnmatch(relative, pattern) for pattern in patterns):
            undeclared.append(relative)
    assert not undeclared, f"declare {undeclared} in [tool.setuptools.package-data]"
