"""Progress bars for long work: shown on a terminal, silent when output is piped."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any, Protocol


class Progress(Protocol):
    def update(self, n: int = 1) -> Any: ...


class _Silent:
    def update(self, n: int = 1) -> None:
        return None


def wants_progress(stream: Any = None) -> bool:
    """True when ``stream`` (default stderr) is an interactive terminal."""
    stream = sys.stderr if stream is None else stream
    return bool(getattr(stream, "isatty", lambda: False)())


@contextmanager
def progress_bar(total: int, description: str, *, enabled: bool,
                 unit: str = "day") -> Iterator[Progress]:
    if not enabled:
        yield _Silent()
        return
    from tqdm import tqdm  # only when a bar is drawn

    with tqdm(total=total, desc=description, unit=unit, file=sys.stderr, leave=False,
              dynamic_ncols=True) as bar:
        yield bar
