"""Calendar days as numpy stores them (``datetime64[D]``) and as people read them (``date``)."""

from __future__ import annotations

from datetime import date
from typing import Any

import numpy as np


def as_date(value: Any) -> date:
    """A ``datetime.date`` from a ``date``, a ``numpy.datetime64`` or an ISO string."""
    if isinstance(value, date):
        return value
    return date.fromisoformat(str(np.datetime64(value, "D")))
