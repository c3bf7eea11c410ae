"""E-mail alerts: what to tell whom after a night, the outbox, and the mailers."""

from monitor.alerts.mailer import EmlFolderMailer, Mailer, SmtpMailer, mailer_for
from monitor.alerts.service import AlertRun, queue_night, send_due, send_night_alerts

__all__ = ["AlertRun", "EmlFolderMailer", "Mailer", "SmtpMailer", "mailer_for", "queue_night",
           "send_due", "send_night_alerts"]
