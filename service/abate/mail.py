"""Reminder e-mail: the RFC 5322 message of a digest, and its delivery by SMTP or into a Maildir."""

import datetime
import email.utils
import hashlib
import html
import json
import mailbox
import smtplib
import ssl
from email.message import EmailMessage
from pathlib import Path

from abate.domain.reminders import DeliveryFailed
from abate.domain.studies import CAUTION

# Seconds an SMTP connection or command may take before the attempt counts as failed.
_SECTION_TITLES = {
    "overdue": "Overdue",
    "due_soon": "Due within {due_soon_days} days",
    "escalated": "Overdue by more than {escalation_days} days in studies you own",
    "occurrence_drift": "Closed actions that observed failures no longer bear out",
}
_DRIFT_COLUMNS = ("Action", "Study", "Failure mode", "Occurrence", "Data implies", "Rate", "Link")
_COLUMNS = ("Action", "Study", "Failure mode", "RPN", "Priority", "Due", "Days overdue", "Owner", "Link")


def message_id(dedup_key, sender):
    """A Message-ID that every attempt at the same reminder shares, so receivers can drop repeats."""
    domain = email.utils.parseaddr(sender)[1].rpartition("@")[2] or "abate.invalid"
    return f"<{hashlib.sha256(dedup_key.encode()).hexdigest()[:40]}@{domain}>"


def subject(payload):
    """The subject line: the day and how many actions each section lists."""
    counts = [
        (len(payload["overdue"]), "overdue"),
        (len(payload["due_soon"]), "due soon"),
        (len(payload["escalated"]), "escalated to you"),
        (len(payload.get("occurrence_drift", [])), "not borne out by data"),
    ]
    summary = ", ".join(f"{count} {label}" for count, label in counts if count)
    # Short enough to stay on the Subject line: a folded one-line value reads back with a leading space.
    return f"Abate {payload['day']}: {summary}"


def _sections(payload):
    for section, title in _SECTION_TITLES.items():
        if payload.get(section):
            yield section, title.format(**payload), payload[section]


def _rate(line):
    return f"{line['rate']:.3g} {line['rate_basis'].replace('_', ' ')}"


def _days(count):
    return f"{count} day" if count == 1 else f"{count} days"


def _timing(line):
    if line["days_overdue"]:
        return f"{_days(line['days_overdue'])} overdue"
    return "due today" if line["days_left"] == 0 else f"due in {_days(line['days_left'])}"


def _footer(recipient):
    return (
        "You get this because you own these corrective actions or their studies. Due-soon notices can be "
        f"turned off with PUT /v1/owners/{recipient}/preferences; overdue notices always come."
    )


def text_body(payload):
    """The plain-text part."""
    lines = [f"Hello {payload['name']},", ""]
    for section, title, entries in _sections(payload):
        lines += [f"{title} ({len(entries)})", ""]
        for line in entries:
            lines.append(f"- {line['title']}")
            lines.append(f"  Study: {line['study_title']} | Failure mode: {line['failure_mode']}")
            if section == "occurrence_drift":
                lines.append(
                    f"  Rated occurrence {line['occurrence']}; observed failures imply {line['implied_occurrence']}"
                    f" ({_rate(line)})"
                )
                lines += [f"  {line['link']}", ""]
                continue
            lines.append(f"  RPN {line['rpn']}, priority {line['priority']}, due {line['due_date']}, {_timing(line)}")
            if section == "escalated":
                lines.append(f"  Owner: {line['owner_name']} <{line['owner_email']}>")
            lines += [f"  {line['link']}", ""]
    lines += [_footer(payload["recipient"]), "", CAUTION, ""]
    return "\n".join(lines)


def _html_cells(section, line):
    """The escaped cells of one line of a section's table, in its columns' order."""
    escape = html.escape
    link = f'<a href="{escape(line["link"])}">{escape(line["link"])}</a>'
    named = [escape(line["title"]), escape(line["study_title"]), escape(line["failure_mode"])]
    if section == "occurrence_drift":
        return [*named, str(line["occurrence"]), str(line["implied_occurrence"]), escape(_rate(line)), link]
    cells = [*named, str(line["rpn"]), escape(line["priority"]), escape(line["due_date"]), str(line["days_overdue"])]
    if section == "escalated":
        cells.append(f"{escape(line['owner_name'])} &lt;{escape(line['owner_email'])}&gt;")
    return [*cells, link]


def _html_columns(section):
    if section == "occurrence_drift":
        return _DRIFT_COLUMNS
    return [column for column in _COLUMNS if column != "Owner" or section == "escalated"]


def html_body(payload):
    """The HTML alternative; every text that came from a user is escaped."""
    escape = html.escape
    parts = [f"<!DOCTYPE html>\n<html><body>\n<p>Hello {escape(payload['name'])},</p>"]
    for section, title, entries in _sections(payload):
        parts.append(f"<h2>{escape(title)} ({len(entries)})</h2>")
        parts.append("<table><tr>" + "".join(f"<th>{column}</th>" for column in _html_columns(section)) + "</tr>")
        for line in entries:
            parts.append("<tr>" + "".join(f"<td>{cell}</td>" for cell in _html_cells(section, line)) + "</tr>")
        parts.append("</table>")
    parts.append(f"<p>{escape(_footer(payload['recipient']))}</p>\n<p><em>{escape(CAUTION)}</em></p>\n</body></html>\n")
    return "\n".join(parts)


def compose(dedup_key, recipient, payload, recorded_at, sender):
    """The digest as an RFC 5322 message: plain text with an HTML alternative, dated when it was recorded."""
    message = EmailMessage()
    message["From"] = sender
    message["To"] = recipient
    message["Subject"] = subject(payload)
    # The recording time, not the sending time, so that a retry is the same message again.
    message["Date"] = email.utils.format_datetime(recorded_at.replace(tzinfo=datetime.UTC))
    message["Message-ID"] = message_id(dedup_key, sender)
    message.set_content(text_body(payload))
    message.add_alternative(html_body(payload), subtype="html")
    return message


def _compose_reminder(reminder, sender):
    return compose(reminder.dedup_key, reminder.recipient, json.loads(reminder.payload), reminder.created_at, sender)


class SmtpPostman:
    """Delivers over one SMTP connection, opened at the first message and again after a failure."""

    def __init__(self, config):
        self._config = config
        self._smtp = None

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self._close()

    def send(self, reminder):
        """Hand one outbox row to the SMTP server; raise DeliveryFailed if it does not accept it."""
        message = _compose_reminder(reminder, self._config["MAIL_FROM"])
        try:
            if self._smtp is None:
                self._smtp = self._connect()
            self._smtp.send_message(message)
        except (smtplib.SMTPException, OSError) as error:
            # The connection may be half-broken; the next message starts a fresh one.
            self._close()
            raise DeliveryFailed(f"{type(error).__name__}: {error}") from error

    def _connect(self):
        config = self._config
        smtp = smtplib.SMTP(config["SMTP_HOST"], int(config["SMTP_PORT"]), timeout=float(config["SMTP_TIMEOUT"]))
        try:
            if config["SMTP_STARTTLS"]:
                # The default context verifies the certificate and the host name; no plain-text fallback.
                smtp.starttls(context=ssl.create_default_context())
            if config["SMTP_USER"]:
                smtp.login(config["SMTP_USER"], config["SMTP_PASSWORD"])
        except (smtplib.SMTPException, OSError):
            smtp.close()
            raise
        return smtp

    def _close(self):
        if self._smtp is None:
            return
        try:
            self._smtp.quit()
        except (smtplib.SMTPException, OSError):
            self._smtp.close()
        self._smtp = None


class MaildirPostman:
    """Delivers into a local Maildir, for a single machine without a mail server (and the demo)."""

    def __init__(self, config):
        self._sender = config["MAIL_FROM"]
        self._path = maildir_path(config)
        self._maildir = None

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self._maildir = None

    def send(self, reminder):
        """Add one outbox row to the Maildir; raise DeliveryFailed if the folder cannot take it."""
        message = _compose_reminder(reminder, self._sender)
        try:
            if self._maildir is None:
                # mailbox.Maildir creates its subfolders only with the folder itself; an empty folder set up
                # by an operator (or a temporary one) would otherwise fail every delivery.
                for subfolder in ("tmp", "new", "cur"):
                    (self._path / subfolder).mkdir(parents=True, exist_ok=True)
                self._maildir = mailbox.Maildir(self._path, create=False)
            self._maildir.add(message)
        except OSError as error:
            raise DeliveryFailed(f"{type(error).__name__}: {error}") from error


def maildir_path(config):
    """Where Maildir delivery goes: MAILDIR, or maildir under the instance folder."""
    return Path(config["MAILDIR"] or Path(config["INSTANCE_PATH"]) / "maildir")


def postman_for(config):
    """SMTP delivery when an SMTP host is set, else the local Maildir."""
    return SmtpPostman(config) if config["SMTP_HOST"] else MaildirPostman(config)
