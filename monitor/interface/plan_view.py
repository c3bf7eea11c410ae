"""``predict`` in plain words: one job's plan in a sentence, a file's plan as a summary."""

from __future__ import annotations

from pathlib import Path

from monitor.config import Wording
from monitor.domain.phrasing import fmt, percent
from monitor.lifecycle.planning import Plan

SHOWN = 20  # rows printed when the plan is not written to a file


def plan_text(result: Plan, words: Wording, out: Path | None) -> str:
    frame = result.frame
    unit = f" {words.y_unit}" if words.y_unit else ""
    head = (f"{result.model.name}, version {result.version.number}, "
            f"{percent(result.level)} prediction intervals")
    if len(frame) == 1 and out is None:
        row = frame.iloc[0]
        values = ", ".join(f"{p} = {row[p]}" for p in result.model.predictors)
        if isinstance(row["reason"], str):
            return f"{head}: {values}: not planned: {row['reason']}"
        edge = ("; outside the range the version was fitted on, so treat it with care"
                if bool(row["extrapolated"]) else "")
        return (f"{head}: a {words.row} with {values} is planned at "
                f"{fmt(row['planned'], 4)}{unit}; {_share(result.level)} such {words.rows} "
                f"take between {fmt(row['lower'], 4)} and {fmt(row['upper'], 4)}{unit}{edge}")
    lines = [f"{head}: {result.planned} of {len(frame)} {words.rows} planned"]
    reasons = result.reasons()
    if reasons:
        lines.append("  not planned: " + "; ".join(f"{n} × {r}" for r, n in reasons.items()))
    flagged = int(frame["extrapolated"].fillna(False).astype(bool).sum())
    if flagged:
        lines.append(f"  {flagged} outside the range the version was fitted on (extrapolated)")
    if out is not None:
        lines.append(f"  written to {out}")
    else:
        shown = frame.head(SHOWN).to_string(index=False, na_rep="")
        lines.extend("  " + line for line in shown.splitlines())
        if len(frame) > SHOWN:
            lines.append(f"  ... {len(frame) - SHOWN} more (write them all with --out FILE)")
    return "\n".join(lines)


def _share(level: float) -> str:
    """'19 in 20' for a 95 % interval, '9 in 10' for 90 %; else the percentage."""
    whole = 1.0 / (1.0 - level)
    if abs(whole - round(whole)) < 1e-9:
        return f"{round(whole) - 1} in {round(whole)}"
    return percent(level) + " of"
