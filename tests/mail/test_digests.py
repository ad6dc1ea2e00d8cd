"""Daily digests at a real SMTP server: who gets one, what it lists, how it is escaped, and only one a day."""

import datetime
import email
import email.policy
import email.utils
import re

from abate.domain.studies import CAUTION
from conftest import make_mode, make_study

# A Tuesday; the job runs at 07:00 UTC, 08:00 in the studies' Europe/Berlin.
TUESDAY = datetime.date(2030, 3, 5)
MORNING = datetime.datetime(2030, 3, 5, 7, 0)
KAI, LENA, ADA = "kai.berg@example.com", "lena.vogt@example.com", "ada@example.com"


def _days(count):
    return TUESDAY + datetime.timedelta(days=count)


def _plain(message):
    return message.get_body(("plain",)).get_content()


def _html(message):
    return message.get_body(("html",)).get_content()


def _only_message_to(smtp_server, address):
    messages = smtp_server.messages_to(address)
    assert len(messages) == 1, [message["Subject"] for message in messages]
    return messages[0]


def test_each_owner_gets_one_digest_of_their_overdue_and_due_soon_actions(open_action, run_at, smtp_server, client):
    overdue = open_action(_days(-4), KAI, title="Add a poka-yoke pin to the fixture")
    mode = {"id": overdue["mode_id"]}
    due_soon = open_action(_days(3), KAI, mode=mode, title="Train the night shift")
    open_action(_days(20), KAI, mode=mode, title="Far in the future")
    cancelled = open_action(_days(-10), KAI, mode=mode, title="Dropped idea")
    client.post(f"/v1/actions/{cancelled['id']}/cancel", json={"reason": "Replaced by the pin"})
    last_due_soon_day = open_action(_days(7), LENA, mode=mode, title="Camera check at station 4")

    report = run_at(MORNING)

    assert [item["recipient"] for item in report.recorded] == [KAI, LENA]
    assert sorted(address for item in smtp_server.received for address in item.rcpt_tos) == [KAI, LENA]
    assert {item.mail_from for item in smtp_server.received} == {"reminders@abate.example.com"}
    kai = _only_message_to(smtp_server, KAI)
    assert kai["To"] == KAI
    assert kai["Subject"] == "Abate 2030-03-05: 1 overdue, 1 due soon"
    text = _plain(kai)
    assert "Add a poka-yoke pin to the fixture" in text and "Train the night shift" in text
    assert "Far in the future" not in text and "Dropped idea" not in text
    assert "Study: Test study | Failure mode: Weld seam cracks" in text
    # S7 O8 D5: RPN 280 (IEC 60812:2018, RPN = S x O x D); at or above the default 100 it is high priority.
    assert "RPN 280, priority high, due 2030-03-01, 4 days overdue" in text
    assert "RPN 280, priority high, due 2030-03-08, due in 3 days" in text
    assert f"https://abate.example.com/v1/actions/{overdue['id']}" in text
    assert f"https://abate.example.com/v1/actions/{due_soon['id']}" in text
    assert text.index("Overdue (1)") < text.index("Due within 7 days (1)")
    assert text.rstrip().endswith(CAUTION)
    lena = _only_message_to(smtp_server, LENA)
    assert lena["Subject"] == "Abate 2030-03-05: 1 due soon"
    assert "Camera check at station 4" in _plain(lena) and "due in 7 days" in _plain(lena)
    assert f"/v1/actions/{last_due_soon_day['id']}" in _html(lena)
    assert CAUTION in _html(lena)


def test_every_message_parses_as_rfc_5322_with_message_id_and_date(open_action, run_at, smtp_server):
    open_action(_days(-1), KAI)
    run_at(MORNING)

    [received] = smtp_server.received
    # RFC 5322, parsed back by the stdlib email parser under email.policy.default.
    message = email.message_from_bytes(received.raw, policy=email.policy.default)
    assert message.defects == []
    assert all(not message[name].defects for name in ("From", "To", "Subject", "Date", "Message-ID"))
    assert re.fullmatch(r"<[0-9a-f]{40}@abate\.example\.com>", message["Message-ID"])
    # The Date is when the digest was recorded, so every retry is the same message.
    assert message["Date"].datetime == MORNING.replace(tzinfo=datetime.UTC)
    assert email.utils.parsedate_to_datetime(str(message["Date"])) == MORNING.replace(tzinfo=datetime.UTC)
    assert message.get_content_type() == "multipart/alternative"
    assert [part.get_content_type() for part in message.iter_parts()] == ["text/plain", "text/html"]


def test_user_text_is_escaped_in_the_html_part_and_kept_in_the_plain_part(open_action, run_at, smtp_server, client):
    hostile = '<script>alert(1)</script> & "x"'
    study = {
        "title": "<b>Bold</b> study",
        "owner": {"name": "Ada <Admin>", "email": ADA},
    }
    created = make_study(client, **study)
    mode = make_mode(client, created["id"], 7, 8, 5, failure_mode="Seam & <i>gap</i>")
    open_action(_days(-30), KAI, mode=mode, title=hostile)
    run_at(MORNING)

    html = _html(_only_message_to(smtp_server, KAI))
    assert "<script>" not in html and "<b>Bold" not in html and "<i>gap" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; &quot;x&quot;" in html
    assert "&lt;b&gt;Bold&lt;/b&gt; study" in html and "Seam &amp; &lt;i&gt;gap&lt;/i&gt;" in html
    assert hostile in _plain(_only_message_to(smtp_server, KAI))
    # The study owner's escalation names the action owner; the name is user text too.
    escalation = _html(_only_message_to(smtp_server, ADA))
    assert "Hello Ada &lt;Admin&gt;," in escalation and "<Admin>" not in escalation


def test_running_again_the_same_day_sends_nothing_and_the_next_day_sends_a_new_digest(open_action, run_at, smtp_server):
    open_action(_days(-2), KAI)
    first = run_at(MORNING)
    again = run_at(MORNING)
    later = run_at(MORNING + datetime.timedelta(hours=15))

    assert len(first.recorded) == 1 and len(first.sent) == 1
    assert (again.recorded, again.sent, later.recorded, later.sent) == ([], [], [], [])
    assert len(smtp_server.messages_to(KAI)) == 1
    next_day = run_at(MORNING + datetime.timedelta(days=1))
    assert [item["dedup_key"] for item in next_day.recorded] == [f"digest:{KAI}:2030-03-06"]
    first_mail, second_mail = smtp_server.messages_to(KAI)
    assert "3 days overdue" in _plain(second_mail)
    assert first_mail["Message-ID"] != second_mail["Message-ID"]


def test_owner_addresses_are_grouped_case_insensitively(open_action, run_at, smtp_server):
    first = open_action(_days(-1), "Kai.Berg@Example.com")
    open_action(_days(1), KAI, mode={"id": first["mode_id"]})
    run_at(MORNING)

    [received] = smtp_server.received
    assert received.rcpt_tos == [KAI]
    assert received.message["Subject"] == "Abate 2030-03-05: 1 overdue, 1 due soon"


def test_an_action_overdue_beyond_the_escalation_days_reaches_the_study_owner_in_their_own_digest(
    open_action, run_at, smtp_server
):
    # ESCALATION_DAYS is 14: 15 days overdue escalates, 14 does not.
    escalated = open_action(_days(-15), KAI, title="Replace the worn electrode")
    mode = {"id": escalated["mode_id"]}
    open_action(_days(-14), KAI, mode=mode, title="Not yet escalated")
    own = open_action(_days(-2), ADA, mode=mode, title="Ada's own action")
    open_action(_days(-20), ADA, mode=mode, title="Ada's own long-overdue action")
    run_at(MORNING)

    ada = _only_message_to(smtp_server, ADA)
    assert ada["Subject"] == "Abate 2030-03-05: 2 overdue, 1 escalated to you"
    text = _plain(ada)
    escalations = text[text.index("Overdue by more than 14 days in studies you own (1)") :]
    assert "Replace the worn electrode" in escalations and "15 days overdue" in escalations
    assert f"Owner: Kai Berg <{KAI}>" in escalations
    assert "Not yet escalated" not in text
    # Her own overdue actions are listed once, as hers, not again as escalations.
    assert text.count("Ada's own long-overdue action") == 1 and "Ada's own long-overdue action" not in escalations
    assert f"/v1/actions/{own['id']}" in text
    kai = _only_message_to(smtp_server, KAI)
    assert kai["Subject"] == "Abate 2030-03-05: 2 overdue"


def test_opting_out_of_due_soon_notices_keeps_the_overdue_ones(open_action, run_at, smtp_server, client):
    first = open_action(_days(-3), KAI, title="Overdue one")
    open_action(_days(2), KAI, mode={"id": first["mode_id"]}, title="Due-soon one")
    open_action(_days(2), LENA, mode={"id": first["mode_id"]}, title="Lena's due-soon one")
    for address in (KAI, LENA):
        response = client.put(f"/v1/owners/{address}/preferences", json={"due_soon_notices": False})
        assert response.status_code == 200 and response.get_json()["due_soon_notices"] is False
    report = run_at(MORNING)

    assert [item["recipient"] for item in report.recorded] == [KAI]
    kai = _only_message_to(smtp_server, KAI)
    assert kai["Subject"] == "Abate 2030-03-05: 1 overdue"
    assert "Overdue one" in _plain(kai) and "Due-soon one" not in _plain(kai)
    assert smtp_server.messages_to(LENA) == []


def test_weekends_are_skipped_only_when_configured(open_action, run_at, smtp_server, mail_app):
    open_action(_days(-1), KAI)
    saturday = datetime.datetime(2030, 3, 9, 7, 0)
    assert saturday.date().isoweekday() == 6
    mail_app.config["REMINDER_SKIP_WEEKENDS"] = True

    skipped = run_at(saturday)
    sunday = run_at(saturday + datetime.timedelta(days=1))
    assert (skipped.skipped, skipped.recorded, sunday.skipped, sunday.recorded) == ("weekend", [], "weekend", [])
    assert smtp_server.received == []
    monday = run_at(saturday + datetime.timedelta(days=2))
    assert monday.skipped is None and len(monday.sent) == 1
    assert "7 days overdue" in _plain(_only_message_to(smtp_server, KAI))

    mail_app.config["REMINDER_SKIP_WEEKENDS"] = False
    next_saturday = run_at(saturday + datetime.timedelta(days=7))
    assert next_saturday.skipped is None and len(next_saturday.sent) == 1
    assert len(smtp_server.messages_to(KAI)) == 2


def test_nobody_with_nothing_due_gets_a_mail(open_action, run_at, smtp_server):
    open_action(_days(30), KAI)
    report = run_at(MORNING)
    assert (report.recorded, report.sent, smtp_server.received) == ([], [], [])
