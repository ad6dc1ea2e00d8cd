"""mode.occurrence_drift: observed failures contradicting a closed prevention action reach a real receiver once."""

import datetime

from webhooks.conftest import close_action, deliver, open_action, subscribe


def _observe(client, mode_id, failures, exposure, key):
    body = {
        "failures": failures,
        "exposure": exposure,
        "period_start": (datetime.date.today() - datetime.timedelta(days=30)).isoformat(),
        "period_end": (datetime.date.today() - datetime.timedelta(days=1)).isoformat(),
        "source_system": "mes",
        "record_key": key,
    }
    response = client.post(f"/v1/modes/{mode_id}/observations", json=body)
    assert response.status_code == 201, response.get_json()
    return response.get_json()


def test_a_drift_is_announced_once_with_its_evidence_and_again_only_after_it_cleared(app, client, receiver):
    _, mode, action = open_action(client, occurrence=6)
    assert close_action(client, action["id"], occurrence=2).status_code == 200
    subscribe(client, receiver, events=["mode.occurrence_drift"])

    # 5 failures in 1,000 units is 5 per thousand: level 7 of the built-in bands (2 <= 5 < 6), above 2.
    first = _observe(client, mode["id"], 5, 1_000, "lot-1")
    second = _observe(client, mode["id"], 4, 1_000, "lot-2")
    deliver(app)

    assert receiver.types() == ["mode.occurrence_drift"]
    data = receiver.requests[0].payload["data"]
    assert (data["mode_id"], data["occurrence"], data["action_ids"]) == (mode["id"], 2, [action["id"]])
    assert data["observation_ids"] == [first["id"]]
    assert data["implied_occurrence"] > 2

    accepted = client.post(
        f"/v1/modes/{mode['id']}/occurrence-suggestion/accept",
        json={"occurrence": client.get(f"/v1/modes/{mode['id']}/occurrence-evidence").get_json()["implied_occurrence"]},
    )
    assert accepted.status_code == 200, accepted.get_json()
    assert accepted.get_json()["occurrence"] > 2
    assert (
        second["id"]
        in client.get(f"/v1/studies/{mode['study_id']}/events?kind=rerated").get_json()["items"][0]["observation_ids"]
    )
    # Re-rated by hand back down below what the data says: the drift returns and is announced again.
    url = f"/v1/modes/{mode['id']}"
    back = client.patch(
        url, json={"occurrence": 2, "reason": "Disputed data"}, headers={"If-Match": client.get(url).headers["ETag"]}
    )
    assert back.status_code == 200
    deliver(app)
    assert receiver.types() == ["mode.occurrence_drift", "mode.occurrence_drift"]
