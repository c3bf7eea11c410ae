"""How long do the quick commands take to answer, against the floor of what they must import?

    python tests/benchmarks/bench_startup.py [--repeats 15] [--config FILE] [--against DIR]

Builds the demo database once (or uses ``--db``, a fitwatch.toml of an existing one), then times
``--help``, ``status``, ``model list`` and ``model show`` as separate processes, each run
``--repeats`` times: median wall time and median CPU time (user + system, which a busy machine
disturbs less than wall time). Baselines measured in the same run: a bare interpreter
(``python -c pass``) and the floor every database command pays, the import of numpy and
SQLAlchemy's engine. Goal (issue 14): each command <= 0.3 s, and <= 0.5 s for any command
before its work starts.

``--against DIR`` times the fitwatch commands of another checkout too (e.g. an earlier commit,
``git worktree add /tmp/old COMMIT``), interleaved with this one's, on the same database or, with
``--against-config``, on a copy at its own schema revision.

The interpreter is called directly (``sys.executable``), not through a version manager's shim,
and bytecode caching is on (``PYTHONDONTWRITEBYTECODE`` is removed), as in an installed copy.
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def timed(argv: list[str], env: dict[str, str], cwd: Path) -> tuple[float, float]:
    """(wall, cpu) seconds of one run of ``argv`` (``PYTHONPATH=DIR`` before it: that env)."""
    if argv[0].startswith("PYTHONPATH="):
        env = {**env, "PYTHONPATH": argv[0].split("=", 1)[1]}
        argv = argv[1:]
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(argv, env=env, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                   check=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--repeats", type=int, default=15)
    parser.add_argument("--config", type=Path, help="fitwatch.toml of an existing database")
    parser.add_argument("--against", type=Path, help="another checkout to time as well")
    parser.add_argument("--against-config", type=Path,
                        help="its database's fitwatch.toml (when its schema revision differs)")
    args = parser.parse_args()
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    py = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        config = args.config
        if config is None:
            subprocess.run([py, "-m", "monitor", "demo"], cwd=work, env=env, check=True,
                           stdout=subprocess.DEVNULL)
            config = work / "fitwatch-demo" / "fitwatch.toml"
        cases = {
            "python -c pass": [py, "-c", "pass"],
            "floor: import numpy, sqlalchemy.engine": [py, "-c",
                                                       "import numpy, sqlalchemy.engine"],
            "fitwatch --help": [py, "-m", "monitor", "--help"],
            "fitwatch status": [py, "-m", "monitor", "--config", str(config), "status"],
            "fitwatch model list": [py, "-m", "monitor", "--config", str(config),
                                    "model", "list"],
            "fitwatch model show": [py, "-m", "monitor", "--config", str(config),
                                    "model", "show", "dock_loading"],
        }
        if args.against is not None:
            older = f"PYTHONPATH={args.against.resolve()}"
            theirs = str(args.against_config or config)
            for name in [n for n in cases if n.startswith("fitwatch")]:
                argv = [theirs if a == str(config) else a for a in cases[name]]
                cases[f"{name} (against)"] = [older, *argv]
        for argv in cases.values():  # warm the bytecode cache and the file cache
            timed(argv, env, work)
        runs: dict[str, list[tuple[float, float]]] = {name: [] for name in cases}
        for _ in range(args.repeats):  # interleaved, so a busy spell hits every case alike
            for name, argv in cases.items():
                runs[name].append(timed(argv, env, work))
    floor = statistics.median(w for w, _ in runs["floor: import numpy, sqlalchemy.engine"])
    print(f"fitwatch start-up, {args.repeats} runs each, medians "
          f"({platform.machine()}, Python {platform.python_version()}, "
          f"{os.cpu_count()} cores, load {os.getloadavg()[0]:.2f})")
    print(f"{'command':42s} {'wall s':>7s} {'cpu s':>7s} {'wall / floor':>13s}")
    for name, values in runs.items():
        wall = statistics.median(w for w, _ in values)
        cpu = statistics.median(c for _, c in values)
        print(f"{name:42s} {wall:7.3f} {cpu:7.3f} {wall / floor:13.2f}")


if __name__ == "__main__":
    main()
