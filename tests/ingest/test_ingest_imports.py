"""Ingesting a plain CSV file loads neither pandas nor SciPy's submodules.

Importing pandas takes about 0.4 s on the project's 2-core machine (``python -X importtime``),
as long as parsing and checking 300 000 rows; pyarrow imports it on the first ``pa.array``,
``Array.to_numpy`` or Python scalar handed to a compute function, so ingestion goes through
``monitor/columnar.py`` instead. The file below takes the usual path plus the per-row
details of a few rejected rows (a DST gap, a value out of range, an empty field), within-file
duplicates and conflicts. Run in a fresh interpreter on this checkout's code; the time itself
is measured by ``tests/benchmarks/bench_ingest.py``, not asserted.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from tests.support.ingest import Store, csv_text

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("pandas", "scipy.stats", "scipy.linalg", "scipy.optimize", "matplotlib")

PROBE = """
import json, sys
from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo
from monitor.ingest.service import IngestOptions, ingest_file
from monitor.store.engine import open_engine
from monitor.store.models import get_model
url, name, path = sys.argv[1:]
engine = open_engine(url)
with engine.connect() as conn:
    model = get_model(conn, name)
options = IngestOptions(ZoneInfo("Europe/Berlin"), {{"pallets": (0, 60)}}, False,
                        datetime(2026, 4, 1, 12, tzinfo=UTC), timedelta(minutes=5), 1000, False)
summary = ingest_file(engine, model, path, options)
heavy = sorted(m for m in {heavy!r} if m in sys.modules)
print(json.dumps({{"read": summary.read, "accepted": summary.accepted,
                   "duplicates": summary.duplicates, "reasons": dict(summary.reasons),
                   "heavy": heavy}}))
"""


@pytest.mark.parametrize("model", ["loads", "hashed"])
def test_ingesting_a_csv_file_does_not_load_pandas(store: Store, model: str) -> None:
    rows = [f"L{i},2026-03-0{1 + i // 720} {6 + i // 60 % 12:02d}:{i % 60:02d},{1 + i % 30},"
            f"{20 + i % 40},D1" for i in range(3000)]
    rows += [rows[10], rows[11].replace(",D1", ",D2"),  # duplicates
             "L7,2026-03-01 07:00,3,99,D1",  # conflicts with L7 (loads); a new row (hashed)
             "G1,2026-03-29 02:30,4,30,D1",  # in the DST gap
             "R1,2026-03-02 09:00,75,30,D1",  # out of range
             "E1,2026-03-02 09:00,,30,D1"]  # empty field
    path = store.write("plain.csv", csv_text(*rows))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    result = subprocess.run(
        [sys.executable, "-c", PROBE.format(heavy=HEAVY),
         store.engine.url.render_as_string(hide_password=False), model, str(path)],
        cwd=store.tmp, env=env, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    outcome = json.loads(result.stdout.splitlines()[-1])
    assert outcome["heavy"] == []
    assert outcome["read"] == 3006
    expected = {"dst_gap": 1, "out_of_range": 1, "empty_field": 1}
    if model == "loads":
        expected["conflict"] = 1
    assert outcome["reasons"] == expected
    assert outcome["duplicates"] == 2
