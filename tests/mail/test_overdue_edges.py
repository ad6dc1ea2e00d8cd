"""Overdue and due-soon around midnight and daylight-saving changes, in each study's own time zone."""

import datetime
import zoneinfo

import pytest

from abate import db
from abate.domain.reminders import SECTIONS, ReminderPolicy, collect_digests
from conftest import make_mode, make_study

KAI = "kai.berg@example.com"

# (study time zone, due date, UTC moment just before local midnight, UTC moment of local midnight)
MIDNIGHTS = [
    # Winter in Berlin: UTC+1, so local midnight of 16 January is 23:00 UTC on the 15th.
    ("Europe/Berlin", datetime.date(2030, 1, 15), datetime.datetime(2030, 1, 15, 22, 59, 59)),
    # New York springs forward on 10 March 2030: the next midnight is 04:00 UTC (EDT), not 05:00 (EST).
    ("America/New_York", datetime.date(2030, 3, 10), datetime.datetime(2030, 3, 11, 3, 59, 59)),
    # Berlin falls back on 27 October 2030: midnight starting that day is still CEST, 22:00 UTC on the 26th.
    ("Europe/Berlin", datetime.date(2030, 10, 26), datetime.datetime(2030, 10, 26, 21, 59, 59)),
    # ... and the 25-hour day ends at 23:00 UTC (CET).
    ("Europe/Berlin", datetime.date(2030, 10, 27), datetime.datetime(2030, 10, 27, 22, 59, 59)),
    # Kiritimati is UTC+14: its 16 January begins at 10:00 UTC on the 15th.
    ("Pacific/Kiritimati", datetime.date(2030, 1, 15), datetime.datetime(2030, 1, 15, 9, 59, 59)),
]


def _local_date(zone, moment):
    """The date at a UTC moment in an IANA zone, from the stdlib zoneinfo (IANA time zone database)."""
    return moment.replace(tzinfo=datetime.UTC).astimezone(zoneinfo.ZoneInfo(zone)).date()


def _lines_at(app, moment):
    """{section: [(action_id, days_overdue)]} of KAI's digest at moment, or None without a digest."""
    with db.database.connection_context():
        digests = collect_digests(moment, ReminderPolicy.from_config(app.config))
    mine = [digest for digest in digests if digest.recipient == KAI]
    if not mine:
        return None
    payload = mine[0].payload()
    return {section: [(line["action_id"], line["days_overdue"]) for line in payload[section]] for section in SECTIONS}


def _action(client, zone, due_date):
    study = make_study(client, timezone=zone)
    mode = make_mode(client, study["id"])
    body = {
        "title": "Recalibrate the torque wrench",
        "kind": "detection",
        "owner": {"name": "Kai Berg", "email": KAI},
        "due_date": due_date.isoformat(),
    }
    response = client.post(f"/v1/modes/{mode['id']}/actions", json=body)
    assert response.status_code == 201, response.get_json()
    return response.get_json()["id"]


@pytest.mark.parametrize(("zone", "due_date", "before_midnight"), MIDNIGHTS)
def test_an_action_becomes_overdue_at_local_midnight_of_its_study(mail_app, client, zone, due_date, before_midnight):
    action_id = _action(client, zone, due_date)
    midnight = before_midnight + datetime.timedelta(seconds=1)
    # The expectations come from zoneinfo, independently of the code under test.
    assert _local_date(zone, before_midnight) == due_date
    assert _local_date(zone, midnight) == due_date + datetime.timedelta(days=1)

    before = _lines_at(mail_app, before_midnight)
    after = _lines_at(mail_app, midnight)

    assert before["overdue"] == [] and before["due_soon"] == [(action_id, 0)]
    assert after["overdue"] == [(action_id, 1)] and after["due_soon"] == []


def test_the_fixed_offset_of_the_season_before_would_be_wrong_after_a_dst_change(mail_app, client):
    # 04:30 UTC on 11 March 2030 is 00:30 EDT in New York (zoneinfo); under EST it would still be the 10th.
    action_id = _action(client, "America/New_York", datetime.date(2030, 3, 10))
    moment = datetime.datetime(2030, 3, 11, 4, 30)
    assert _local_date("America/New_York", moment) == datetime.date(2030, 3, 11)
    assert (moment - datetime.timedelta(hours=5)).date() == datetime.date(2030, 3, 10)
    assert _lines_at(mail_app, moment)["overdue"] == [(action_id, 1)]


def test_days_overdue_count_calendar_days_across_the_25_hour_day(mail_app, client):
    action_id = _action(client, "Europe/Berlin", datetime.date(2030, 10, 26))
    # 23:00 UTC on 27 October 2030 is 00:00 CET on the 28th (zoneinfo): two calendar days late.
    moment = datetime.datetime(2030, 10, 27, 23, 0)
    assert (_local_date("Europe/Berlin", moment) - datetime.date(2030, 10, 26)).days == 2
    assert _lines_at(mail_app, moment)["overdue"] == [(action_id, 2)]


def test_a_study_ahead_of_utc_sees_its_due_soon_window_from_its_own_date(mail_app, client):
    # At 10:00 UTC on 15 January 2030 it is already the 16th at 00:00 in Kiritimati (zoneinfo), so an
    # action due on the 23rd is due in 7 days there: the last day of the window.
    moment = datetime.datetime(2030, 1, 15, 10, 0)
    assert _local_date("Pacific/Kiritimati", moment) == datetime.date(2030, 1, 16)
    action_id = _action(client, "Pacific/Kiritimati", datetime.date(2030, 1, 23))
    _action(client, "Pacific/Kiritimati", datetime.date(2030, 1, 24))
    assert _lines_at(mail_app, moment)["due_soon"] == [(action_id, 0)]
