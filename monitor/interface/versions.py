"""Read-only views of versions: ``model show``, ``model list`` and the version documents that
``model fit``, ``refit`` and ``compare`` print."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from sqlalchemy import Engine

from monitor.config import Settings, Wording
from monitor.domain.codec import encode
from monitor.domain.model import ModelSpec
from monitor.domain.phrasing import fit_summary, fmt, percent
from monitor.domain.version import VersionSheet, VersionSource
from monitor.monitoring.window_wording import WindowFinding, window_findings
from monitor.store.access import database
from monitor.store.models import get_model
from monitor.store.version_sheets import LearnedSoFar, learned_so_far, version_sheet

if TYPE_CHECKING:  # the views of versions in memory pass them; model show reads a sheet
    from monitor.domain.version import Version
    from monitor.stats.self_start import Learning


def version_document(model: ModelSpec, version: Version) -> dict[str, Any]:
    """The JSON document of a version (``model show --json`` and inside others)."""
    return VersionView.of(model, version).as_dict()


@dataclass(frozen=True, eq=False)
class VersionView:
    """A version in words and as a JSON document, from what the views show of it (its sheet)
    and what it learned up to its last check."""

    model: ModelSpec
    version: VersionSheet
    words: Wording = field(default_factory=Wording)
    learned: LearnedSoFar | None = None  # what the version learned, at its last check

    @classmethod
    def of(cls, model: ModelSpec, version: Version, words: Wording | None = None,
           learning: Learning | None = None) -> VersionView:
        """The view of a version in memory (and of the learning of its last check)."""
        return cls(model, version.sheet(), words or Wording(),
                   None if learning is None else LearnedSoFar.of(learning))

    def as_dict(self) -> dict[str, Any]:
        v, m = self.version, self.model
        line, base = v.line, v.baseline
        cal = base.calibration
        return {
            "model": m.name, "version": v.number, "state": v.state, "source": v.source,
            "response": m.response, "predictors": list(m.predictors),
            "coefficients": line.coefficient_map(),
            "std_errors": (line.coefficient_map(line.std_errors)
                           if line.std_errors is not None else None),
            "s": line.s, "dof": line.dof, "r_squared": line.r_squared,
            "adj_r_squared": line.adj_r_squared, "n": line.n, "level": line.level,
            "condition_number": line.condition_number,
            "fit_window": [v.fit_start, v.fit_end], "active_from": v.active_from,
            "active_until": v.active_until,
            "ranges": None if line.x_min is None or line.x_max is None else {
                name: [lo, hi]
                for name, lo, hi in zip(m.predictors, line.x_min, line.x_max, strict=True)},
            "day_effects": {"tau2": base.tau2, "sigma_w2": base.sigma_w2,
                            "present": None if base.day_effects is None
                            else base.day_effects.present()},
            "dispersion": base.dispersion,
            "cusum": {"k": cal.k if cal else None, "h": cal.h if cal else None,
                      "target_arl": cal.target_arl if cal else None,
                      "guarantee": cal.guarantee if cal and cal.calibrated else None,
                      "promise": self.promise(),
                      "h_known": cal.h_known if cal else None,
                      "arl_known": cal.arl_known if cal else None,
                      "calibrated": cal.calibrated if cal else None,
                      "learn_until_days": cal.learn_until if cal else None,
                      "learned_days": (self.learned.level_days
                                       if self.learned is not None and cal and cal.learn_until
                                       else None)},
            "slope_chart": self.slope_chart(),
            "fit_window_findings": [
                {"topic": f.topic, "found": f.found, "text": f.text}
                for f in self.findings()],
            "fit_window_tests": encode(base.diagnosis) if base.diagnosis else None,
            "notes": list(v.notes),
            "created_at": v.created_at, "created_by": v.created_by, "note": v.note,
        }

    def text(self) -> str:
        d = self.as_dict()
        v = self.version
        line, base = v.line, v.baseline
        origin = ", imported" if v.source == VersionSource.IMPORT else ""
        lines = [f"{d['model']} version {v.number} ({v.state}{origin})",
                 f"  {self.model.response} = " + " + ".join(
                     f"{fmt(val, 4)}" + ("" if term == "intercept" else f" × {term}")
                     for term, val in d["coefficients"].items())]
        if d["std_errors"]:
            lines.append("  standard errors: " + ", ".join(
                f"{t} {fmt(se, 3)}" for t, se in d["std_errors"].items()))
        lines.append("  " + fit_summary(line, self.words.rows, self.words.y_unit))
        if v.fit_start:
            lines.append(f"  fit window {v.fit_start} .. {v.fit_end}")
        if v.active_from:
            until = f" through {v.active_until}" if v.active_until else ""
            lines.append(f"  scores days from {v.active_from}{until}")
        if base.tau2 is not None and base.sigma_w2 is not None:
            lines.append(f"  day-to-day sd {fmt(base.tau2 ** 0.5, 3)}, within-day sd "
                         f"{fmt(base.sigma_w2 ** 0.5, 3)}")
        cal = base.calibration
        if cal is not None:
            lines.append(f"  bias chart limit {fmt(cal.h, 3)} (k = {fmt(cal.k, 2)}; at least "
                         f"{fmt(cal.target_arl, 4)} days between false alarms, "
                         f"{self.promise()})")
            if cal.learn_until and base.fit_days:
                lines.append("  " + self.learning_text(base.fit_days, cal.learn_until))
        chart = d["slope_chart"]
        if chart is not None:
            several = len(set(chart["lane_predictors"])) > 1
            lanes = ", ".join(f"{fmt(h, 3) if h is not None else 'none'} ("
                              f"{name + ', ' if several else ''}tuned to {percent(step)})"
                              for h, step, name in zip(chart["h"], chart["lane_steps"],
                                                       chart["lane_predictors"], strict=True))
            lines.append(f"  within-day slope chart limits {lanes}; at least "
                         f"{fmt(chart['target_arl'], 4)} days between false alarms")
            lines.append("  " + self.slope_learning_text(chart))
        found = [f for f in self.findings() if f.found]
        if found:
            lines.append("  the fit window shows:")
            lines.extend(f"    - {f.text}" for f in found)
        elif base.diagnosis is not None:
            lines.append("  the fit window shows no persistence, weekday rhythm, spread growing "
                         "with the predictors or excess outliers")
        if v.note:
            lines.append(f"  about it: {v.note}")
        lines.extend(f"  note: {note}" for note in v.notes)
        return "\n".join(lines)

    def promise(self) -> str | None:
        """How far the bias chart's false-alarm spacing can be relied on (text and JSON)."""
        v = self.version
        cal = v.baseline.calibration
        if cal is None:
            return None
        if cal.learn_until:
            return (f"self-starting: fitted on fewer than {cal.learn_until} days, the version "
                    "learns its level from its own in-control days until it counts "
                    f"{cal.learn_until}, so this limit holds exactly meanwhile; the first refit "
                    "stops the learning")
        if cal.calibrated:
            return f"held with probability {fmt(cal.guarantee, 2)}"
        if v.source == VersionSource.IMPORT:
            return ("but only if the imported coefficients and scatter are exact: the file "
                    "carries no days of the fit window, so their estimation error is not "
                    "allowed for (a version fitted here allows for it); if the line was fitted "
                    "on few rows, false alarms may come sooner")
        return f"but only if the fitted values are exact ({cal.reason})"

    def learning_text(self, fit_days: int, learn_until: int) -> str:
        """How far a self-starting version has learned its level."""
        if self.learned is None:
            return (f"learned so far: its {fit_days} fit days of {learn_until} (no day of its "
                    "own checked yet)")
        days = fit_days + self.learned.level_days
        state = ("stopped by a refit until it is acknowledged or replaced"
                 if self.learned.stopped else
                 "done; the limit now allows for the level's estimation error"
                 if days >= learn_until else "learning")
        return (f"learned so far: {days} of {learn_until} days ({fit_days} fit days and "
                f"{self.learned.level_days} checked days); {state}")

    def slope_chart(self) -> dict[str, Any] | None:
        """The within-day slope chart's limits and its reference's learning (JSON)."""
        limits = self.version.baseline.slope_limits
        if limits is None:
            return None
        k = len(self.model.predictors)
        steps = [limits.step] * k + ([limits.small_step] * k if len(limits.h) > k else [])
        learned = self.learned
        return {"h": list(limits.h), "lane_steps": steps,
                "lane_predictors": [self.model.predictors[i % k] for i in range(len(limits.h))],
                "target_arl": limits.target_arl, "reference": limits.reference,
                "learned_days": (learned.slope_days if learned is not None
                                 and limits.reference == "learning" else None),
                "learning_stopped": (learned.stopped if learned is not None
                                     and limits.reference == "learning" else None),
                "held_days": (learned.held_days if learned is not None
                              and limits.reference == "learning" else None)}

    @staticmethod
    def slope_learning_text(chart: dict[str, Any]) -> str:
        """How the slope chart's reference stands."""
        if chart["reference"] != "learning":
            return ("its reference is the fit window's slope, and the limits allow for that "
                    "slope's estimation error")
        days = chart["learned_days"]
        if days is None:
            return ("its reference learns from the version's own in-control days (none "
                    "checked yet)")
        state = ("stopped by a refit until it is acknowledged or replaced"
                 if chart["learning_stopped"] else "learning")
        held = chart.get("held_days") or 0
        waiting = (f", and holds the last {held} back until enough later days pass without a "
                   "sign of change" if held else "")
        return (f"its reference has learned the slopes of {days} checked day(s) on top of the "
                f"fit window's{waiting}; {state}")

    def findings(self) -> list[WindowFinding]:
        d = self.version.baseline.diagnosis
        if d is None:
            return []
        return window_findings(d, self.words, self.model.response, self.model.predictors)


def show_version(settings: Settings, name: str, number: int | None = None, *,
                 engine: Engine | None = None) -> VersionView:
    """``model show``: version ``number`` (else the active one, else the latest) read as a sheet,
    with the learning of the model's last check when that version scored it."""
    with database(settings, engine, sections="warn") as db, db.connect() as conn:
        model = get_model(conn, name)
        sheet = version_sheet(conn, model.id, number, model_name=name)
        learned = learned_so_far(conn, model.id, sheet.id)
    return VersionView(model, sheet, settings.for_model(name).words, learned)
