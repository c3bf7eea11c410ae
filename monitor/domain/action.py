"""A promotion, rollback or acknowledgement as the audit log keeps it, and how it reads.

Actions take effect on the model's next unchecked day (``effective_day``); until a check has
run on that day, what the last check said belongs to the state before the action. The views
(``status``, the e-mail, the command's own answer) word an action with the phrases here.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from datetime import date
from typing import Any

RESTART_ACTIONS = ("promote", "rollback", "ack")


@dataclass(frozen=True)
class Action:
    """A promotion, rollback or acknowledgement, as the audit log recorded it."""

    action: str  # promote | rollback | ack
    effective_day: date
    actor: str
    reason: str | None
    version: int | None  # the version in force from effective_day
    previous: int | None  # the version in force before it
    copy_of: int | None = None  # a rollback: the earlier version whose line came back
    recorded_on: date | None = None  # the local day it was recorded

    def as_dict(self) -> dict[str, Any]:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    @property
    def takes_over(self) -> bool:
        """A promotion or rollback: another version scores from ``effective_day``."""
        return self.action in ("promote", "rollback")

    def how(self) -> str:
        """Who did what, when and why: 'promoted by lead on 2026-04-13: new layout'; a rollback
        also says that the earlier line came back under a new number (each version scores one
        unbroken run of days)."""
        verb = {"promote": "promoted", "ack": "acknowledged"}.get(
            self.action, f"rolled back to version {self.copy_of}")
        on = f" on {self.recorded_on}" if self.recorded_on else ""
        why = f": {self.reason}" if self.reason else ""
        text = f"{verb} by {self.actor}{on}{why}"
        if self.action == "rollback" and self.copy_of is not None:
            text += (f"; version {self.version} is version {self.copy_of}'s line under a new "
                     "number")
        return text
