"""Child process for the tests of several workers: one worker's share of a night.

Usage: ``python -m tests.support.night_worker CONFIG NOW_ISO [--pause S] [--die-in N]``

``--pause S`` sleeps S seconds after each model's check (so two workers interleave);
``--die-in N`` kills the process with SIGKILL inside its N-th model: after that model's check
has committed and before its claim is marked done (test-only: nothing in ``monitor/`` knows
it). On completion it prints ``SHARE`` with the models it checked, as JSON, and ``DONE``.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import time
from datetime import datetime
from typing import Any

import monitor.runtime.nightly as nightly
from monitor.config import load_settings
from monitor.store.engine import open_engine


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("config")
    parser.add_argument("now")
    parser.add_argument("--pause", type=float, default=0.0)
    parser.add_argument("--die-in", type=int, default=0)
    args = parser.parse_args()
    real_check = nightly._check_one
    models: list[str] = []

    def check_one(settings: Any, engine: Any, name: str, *rest: Any) -> Any:
        outcome = real_check(settings, engine, name, *rest)
        models.append(name)
        if len(models) == args.die_in:
            os.kill(os.getpid(), signal.SIGKILL)
        time.sleep(args.pause)
        return outcome
    nightly._check_one = check_one  # type: ignore[assignment]

    settings = load_settings(args.config)
    engine = open_engine(settings.database_url)
    try:
        share = nightly.work_round(settings, engine, now=datetime.fromisoformat(args.now),
                                   poll_seconds=0.2)
    finally:
        engine.dispose()
    print("SHARE " + json.dumps({"models": models, "days": share.days,
                                 "wrapped": share.wrapped}), flush=True)
    print("DONE", flush=True)


if __name__ == "__main__":
    main()
