"""Writing a report's files: the Jinja2 environment (autoescaped) and whole-file replacement.

A page is rewritten while someone may have it open (the daemon refreshes the team page after
each run), so every file is written beside its final name and moved over it in one step: a
reader sees the old file or the new one, never half of one.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from functools import cache
from pathlib import Path
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined

from monitor.errors import InputError


@cache
def _environment() -> Environment:
    return Environment(loader=PackageLoader("monitor.report", "templates"), autoescape=True,
                       undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True,
                       keep_trailing_newline=True)


def render(template: str, context: Mapping[str, Any]) -> str:
    """``template`` (in ``monitor/report/templates``) rendered with every value escaped."""
    return _environment().get_template(template).render(**context)


def unusable(out_dir: Path, page: str) -> None:
    """Raise an InputError when ``out_dir`` exists and is not a folder (checked before the work,
    so a mistyped path costs nothing)."""
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{out_dir} is a file; the report needs a folder to write "
                         f"{page} and its charts into")


def folder_for(out_dir: Path, page: str) -> Path:
    """``out_dir``, created when missing; an InputError says why it cannot hold the page."""
    unusable(out_dir, page)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the report folder {out_dir}: {exc.strerror}") from exc
    return out_dir


def write_files(folder: Path, files: Mapping[str, bytes]) -> None:
    """Write each file whole into ``folder``, in the order given (the page last, after the
    charts it shows)."""
    for name, content in files.items():
        target = folder / name
        part = folder / f".{name}.part"
        try:
            part.write_bytes(content)
            os.replace(part, target)
        except OSError as exc:
            part.unlink(missing_ok=True)
            raise InputError(f"cannot write {target}: {exc.strerror}") from exc
