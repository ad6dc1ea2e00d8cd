"""The risk burn-down chart: /v1/studies/{id}/history.svg and .png over the same range as /history."""

import datetime
import struct
import threading
import xml.etree.ElementTree as ET
import zoneinfo

import pytest
import requests

from abate.domain.studies import CAUTION
from conftest import make_mode, make_study

SVG_NAMESPACE = "{http://www.w3.org/2000/svg}"
# PNG signature and IHDR layout: PNG specification (ISO/IEC 15948, W3C PNG), sections 5.2 and 11.2.2.
PNG_SIGNATURE = bytes([0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A])
ZONE = "Europe/Berlin"
TITLE = "Coolant pump $3 & <seal> line"
AXIS_LABELS = ("Total RPN (sum of S × O × D)", "Modes needing action (count)", f"Date ({ZONE})")


def _days_ago(days):
    return datetime.datetime.now(datetime.UTC) - datetime.timedelta(days=days)


def _rfc3339(moment):
    return moment.isoformat().replace("+00:00", "Z")


def _local_date(moment):
    """The calendar date of an instant in ZONE, from the stdlib zoneinfo (IANA time zone database)."""
    return moment.astimezone(zoneinfo.ZoneInfo(ZONE)).date().isoformat()


def _study_with_a_closed_action(client):
    """A study whose S7 O8 D5 mode was re-rated by an action closed 30 days ago, with another action open."""
    study = make_study(client, title=TITLE, timezone=ZONE)
    closed_mode = make_mode(client, study["id"], 7, 8, 5, effective_at=_rfc3339(_days_ago(40)))
    action = client.post(
        f"/v1/modes/{closed_mode['id']}/actions",
        json={
            "title": "Error-proof the seal press",
            "kind": "prevention",
            "owner": {"name": "Ada Brandt", "email": "ada.brandt@example.com"},
            "due_date": _local_date(_days_ago(25)),
            "target": {"occurrence": 6, "detection": 4},
            "effective_at": _rfc3339(_days_ago(35)),
        },
    ).get_json()
    closed = client.post(
        f"/v1/actions/{action['id']}/close",
        json={
            "result": {"occurrence": 6, "detection": 4},
            "evidence": "Capability run of 500 parts, no leak found",
            "verified_by": "R. Inspector",
            "effective_at": _rfc3339(_days_ago(30)),
        },
    )
    # S7 O8 D5 = 280 re-rated to S7 O6 D4 = 168 (Lovely Professional University, DMGT524, unit 12).
    assert closed.status_code == 200 and closed.get_json()["result"] == {"severity": 7, "occurrence": 6, "detection": 4}
    open_mode = make_mode(client, study["id"], 6, 6, 6)
    opened = client.post(
        f"/v1/modes/{open_mode['id']}/actions",
        json={
            "title": "Add a leak test",
            "kind": "detection",
            "owner": {"name": "Ada Brandt", "email": "ada.brandt@example.com"},
            "due_date": _local_date(_days_ago(-20)),
            "target": {"detection": 2},
        },
    )
    assert opened.status_code == 201
    return study


def _svg(response):
    """The parsed SVG document (W3C SVG 1.1, parsed by the stdlib xml.etree.ElementTree)."""
    assert response.status_code == 200, response.get_json()
    assert response.mimetype == "image/svg+xml"
    root = ET.fromstring(response.data)
    assert root.tag == f"{SVG_NAMESPACE}svg"
    return root


def _texts(root):
    return ["".join(element.itertext()) for element in root.iter(f"{SVG_NAMESPACE}text")]


def _drawn(root, gid):
    """The paths of the chart element with this id, or None if it was not drawn."""
    element = next((element for element in root.iter() if element.get("id") == gid), None)
    return None if element is None else list(element.iter(f"{SVG_NAMESPACE}path"))


def test_svg_chart_is_titled_labelled_and_carries_the_caution(client):
    study = _study_with_a_closed_action(client)
    root = _svg(client.get(f"/v1/studies/{study['id']}/history.svg", query_string={"interval": "week"}))
    texts = _texts(root)
    # The title is drawn as typed: "$" starts no formula and "&" or "<" are escaped, not lost.
    assert f"Risk burn-down: {TITLE}" in texts
    assert CAUTION in texts
    assert set(AXIS_LABELS) <= set(texts)
    assert {"Total RPN", "Modes needing action", "Corrective action closed"} <= set(texts)
    assert _drawn(root, "total-rpn") and _drawn(root, "needs-action") and _drawn(root, "projection")
    assert len(_drawn(root, "action-closures")) == 1


def test_png_chart_is_a_png_of_1000_by_560_pixels(client):
    study = _study_with_a_closed_action(client)
    response = client.get(f"/v1/studies/{study['id']}/history.png", query_string={"interval": "day"})
    assert response.status_code == 200 and response.mimetype == "image/png"
    image = response.data
    assert image[:8] == PNG_SIGNATURE
    # The first chunk is IHDR: 4-byte length, type, then width and height as big-endian 4-byte integers.
    assert image[12:16] == b"IHDR"
    assert struct.unpack(">II", image[16:24]) == (1000, 560)


def test_the_same_past_range_gives_the_same_svg_bytes(client):
    study = _study_with_a_closed_action(client)
    query = {"interval": "day", "from": _local_date(_days_ago(45)), "to": _local_date(_days_ago(10))}
    first = client.get(f"/v1/studies/{study['id']}/history.svg", query_string=query)
    second = client.get(f"/v1/studies/{study['id']}/history.svg", query_string=query)
    assert first.data == second.data
    root = _svg(first)
    assert len(_drawn(root, "action-closures")) == 1
    # The projection starts now, so a range that ends in the past has none.
    assert _drawn(root, "projection") is None


def test_parallel_renders_on_a_threaded_server_give_equal_images(client, live_server, auth_headers):
    study = _study_with_a_closed_action(client)
    query = {"interval": "day", "from": _local_date(_days_ago(45)), "to": _local_date(_days_ago(10))}
    expected = {
        image_format: client.get(f"/v1/studies/{study['id']}/history.{image_format}", query_string=query).data
        for image_format in ("svg", "png")
    }
    answers, start = [], threading.Barrier(8)

    def fetch(image_format):
        start.wait(timeout=10)
        response = requests.get(
            f"{live_server}/v1/studies/{study['id']}/history.{image_format}",
            params=query,
            headers=auth_headers,
            timeout=60,
        )
        answers.append((image_format, response.status_code, response.content))

    threads = [threading.Thread(target=fetch, args=(image_format,)) for image_format in ("svg", "png") * 4]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=90)
    assert len(answers) == 8
    # matplotlib's pyplot keeps global figures; the chart uses none, so concurrent renders do not mix.
    assert all(status == 200 and content == expected[image_format] for image_format, status, content in answers)


def test_a_study_without_events_still_renders_both_formats(client):
    study = make_study(client, title="Empty study", timezone=ZONE)
    root = _svg(client.get(f"/v1/studies/{study['id']}/history.svg"))
    assert "Risk burn-down: Empty study" in _texts(root) and set(AXIS_LABELS) <= set(_texts(root))
    assert _drawn(root, "total-rpn") is not None and _drawn(root, "action-closures") is None
    png = client.get(f"/v1/studies/{study['id']}/history.png")
    assert png.status_code == 200 and png.data[:8] == PNG_SIGNATURE


def test_a_range_not_yet_begun_renders_an_empty_chart(client):
    study = make_study(client, title="Empty study", timezone=ZONE)
    query = {"from": _local_date(_days_ago(-30)), "to": _local_date(_days_ago(-60))}
    root = _svg(client.get(f"/v1/studies/{study['id']}/history.svg", query_string=query))
    assert "No history in this range" in _texts(root) and CAUTION in _texts(root)
    assert _drawn(root, "projection") is None and _drawn(root, "action-closures") is None


@pytest.mark.parametrize("image_format", ["svg", "png"])
def test_an_unknown_study_is_a_404_problem(client, image_format):
    response = client.get(f"/v1/studies/999999/history.{image_format}")
    # RFC 9457: problem details under application/problem+json.
    assert response.status_code == 404 and response.mimetype == "application/problem+json"
    assert response.get_json()["status"] == 404 and "999999" in response.get_json()["detail"]


@pytest.mark.parametrize(
    ("query", "field"),
    [
        pytest.param({"interval": "year"}, "interval", id="unknown-interval"),
        pytest.param({"from": "2026-03-10", "to": "2026-03-01"}, "to", id="range-backwards"),
        pytest.param({"modes": "all"}, "modes", id="argument-of-the-json-history-only"),
    ],
)
@pytest.mark.parametrize("image_format", ["svg", "png"])
def test_bad_query_arguments_are_a_422_problem(client, image_format, query, field):
    study = make_study(client, timezone=ZONE)
    response = client.get(f"/v1/studies/{study['id']}/history.{image_format}", query_string=query)
    assert response.status_code == 422 and response.mimetype == "application/problem+json"
    body = response.get_json()
    assert body["status"] == 422 and [error["field"] for error in body["errors"]] == [field]
