"""Drift in the owner's next digest: a closed action the observed failures no longer bear out, mailed once."""

import datetime

from conftest import make_mode, make_study

MORNING = datetime.datetime(2030, 3, 5, 7, 0)
NEXT_MORNING = MORNING + datetime.timedelta(days=1)
INES = "ines.moreau@example.com"


def _closed_prevention_action(client, mode):
    body = {
        "title": "Add a guide pin to the press tool",
        "kind": "prevention",
        "owner": {"name": "Ines Moreau", "email": INES},
        "due_date": "2030-02-01",
    }
    action = client.post(f"/v1/modes/{mode['id']}/actions", json=body).get_json()
    closed = client.post(
        f"/v1/actions/{action['id']}/close", json={"result": {"occurrence": 2}, "evidence": "500 parts, no fault"}
    )
    assert closed.status_code == 200, closed.get_json()
    return action


def test_the_owner_hears_once_that_data_does_not_bear_out_the_closed_action(client, run_at, smtp_server):
    study = make_study(client, title="Press line <3>")
    mode = make_mode(client, study["id"], 7, 6, 5, failure_mode="Burr on the punched edge")
    action = _closed_prevention_action(client, mode)
    today = datetime.date.today()
    observation = {
        "failures": 5,
        "exposure": 1_000,
        "period_start": (today - datetime.timedelta(days=30)).isoformat(),
        "period_end": (today - datetime.timedelta(days=1)).isoformat(),
        "source_system": "mes",
        "record_key": "lot-7",
    }
    assert client.post(f"/v1/modes/{mode['id']}/observations", json=observation).status_code == 201

    report = run_at(MORNING)

    assert [(item["recipient"], item["occurrence_drift"]) for item in report.recorded] == [(INES, 1)]
    [message] = smtp_server.messages_to(INES)
    assert message["Subject"] == "Abate 2030-03-05: 1 not borne out by data"
    text = message.get_body(("plain",)).get_content()
    assert "Closed actions that observed failures no longer bear out (1)" in text
    assert "- Add a guide pin to the press tool" in text
    # 5 failures in 1,000 units: the 90 % upper bound chi2.ppf(0.9, 12) / 2,000 is 9.27 per thousand
    # (scipy.stats.chi2), level 8 of the built-in bands (6 <= 9.27 < 20).
    assert "Rated occurrence 2; observed failures imply 8" in text
    assert f"/v1/modes/{mode['id']}/occurrence-evidence" in text
    html = message.get_body(("html",)).get_content()
    # User text is escaped in the HTML part (OWASP XSS prevention: encode before inserting into HTML).
    assert "Press line &lt;3&gt;" in html and "Press line <3>" not in html
    assert f"/v1/actions/{action['id']}" not in text  # the line links to the evidence, not the closed action

    run_at(NEXT_MORNING)
    assert len(smtp_server.messages_to(INES)) == 1
