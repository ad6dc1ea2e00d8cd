"""The invented demo scenario, replayed in time order through the thin client with back-dated effective_at."""

import datetime

from abate import db
from abate.domain.tokens import create_token, revoke_token
from abate.models import Study
from abate.serving import served_in_thread

DEMO_TOKEN_NAME = "demo loader"
# Dated steps of one day go out from this time (UTC) on, a few minutes apart, in the file's order.
FIRST_STEP_AT = datetime.time(8, 0)
STEP_SPACING = datetime.timedelta(minutes=5)
# These changes take no effective_at: they happen when the loader runs, so the scenario puts them on its last day.
UNDATED_STEPS = ("move_due_date", "cancel_action", "retire_mode", "observe")


def scenario_start(scenario, today):
    """The first day of the scenario: span_days before today, so that its last day is today."""
    return today - datetime.timedelta(days=scenario["span_days"])


def timed_steps(scenario, today):
    """(step, moment) in replay order; the moment is an aware UTC datetime, or None for an undated step."""
    start = scenario_start(scenario, today)
    steps_by_day = {}
    for step in scenario["timeline"]:
        undated = step["do"] in UNDATED_STEPS
        if undated != (step["day"] == scenario["span_days"]) or not 0 <= step["day"] <= scenario["span_days"]:
            raise ValueError(
                f"step {step}: {', '.join(UNDATED_STEPS)} fall on day {scenario['span_days']} (today), others before"
            )
        steps_by_day.setdefault(step["day"], []).append(step)
    for day in sorted(steps_by_day):
        first = datetime.datetime.combine(start + datetime.timedelta(days=day), FIRST_STEP_AT, tzinfo=datetime.UTC)
        for position, step in enumerate(steps_by_day[day]):
            yield step, None if step["do"] in UNDATED_STEPS else first + position * STEP_SPACING


class _Replay:
    """Turns timeline steps into client calls, remembering the id each step's key created."""

    def __init__(self, api, start):
        self.api, self.start = api, start
        self.studies, self.modes, self.actions = {}, {}, {}

    def _day(self, offset):
        return self.start + datetime.timedelta(days=offset)

    def add_mode(self, step, moment):
        """A failure mode found (at the study's workshop or later)."""
        mode = self.api.modes.create(self.studies[step["study"]], **step["mode"], effective_at=moment)
        self.modes[step["key"]] = mode.id

    def open_action(self, step, moment):
        """A corrective action decided, due on its due_day of the scenario."""
        fields = {name: value for name, value in step["action"].items() if name != "due_day"}
        due_date = self._day(step["action"]["due_day"])
        action = self.api.actions.create(self.modes[step["mode"]], **fields, due_date=due_date, effective_at=moment)
        self.actions[step["key"]] = action.id

    def close_action(self, step, moment):
        """An action closed with its evidence and verified ratings."""
        action = self.api.actions.get(self.actions[step["action"]])
        self.api.actions.close(
            action, step["evidence"], step["result"], verified_by=step["verified_by"], effective_at=moment
        )

    def rerate(self, step, moment):
        """A re-rating outside any action, with its reason."""
        mode = self.api.modes.get(self.modes[step["mode"]])
        self.api.modes.update(mode, reason=step["reason"], **step["changes"], effective_at=moment)

    def move_due_date(self, step, moment):
        """An action's due date moved (and perhaps its status), today."""
        action = self.api.actions.get(self.actions[step["action"]])
        changes = {"due_date": self._day(step["due_day"]), **({"status": step["status"]} if "status" in step else {})}
        self.api.actions.update(action, reason=step["reason"], **changes)

    def cancel_action(self, step, moment):
        """An action dropped, today."""
        self.api.actions.cancel(self.api.actions.get(self.actions[step["action"]]), step["reason"])

    def retire_mode(self, step, moment):
        """A mode that can no longer happen taken out of the study, today."""
        self.api.modes.retire(self.api.modes.get(self.modes[step["mode"]]), step["reason"])

    def observe(self, step, moment):
        """Failures the plant's systems counted over a past period of the scenario, reported today."""
        fields = {name: value for name, value in step["observation"].items() if not name.endswith("_day")}
        period = {
            "period_start": self._day(step["observation"]["period_start_day"]),
            "period_end": self._day(step["observation"]["period_end_day"]),
        }
        self.api.observations.record(self.modes[step["mode"]], **fields, **period)


def load_scenario(api, scenario, today=None):
    """Create the scenario's studies that are not there yet (by title) and replay their timeline through api.

    Return (loaded titles, skipped titles). A study that is already there is left as it is.
    """
    today = today or datetime.datetime.now(datetime.UTC).date()
    existing = {study.title for study in api.studies.list()}
    scale_ids = {scale_set.name: scale_set.id for scale_set in api.scales.list()}
    replay = _Replay(api, scenario_start(scenario, today))
    loaded, skipped = [], []
    for spec in scenario["studies"]:
        if spec["title"] in existing:
            skipped.append(spec["title"])
            continue
        fields = {name: value for name, value in spec.items() if name not in ("key", "scale")}
        replay.studies[spec["key"]] = api.studies.create(**fields, scale_id=scale_ids[spec["scale"]]).id
        loaded.append(spec["title"])
    for step, moment in timed_steps(scenario, today):
        if step["study"] in replay.studies:
            getattr(replay, step["do"])(step, moment)
    return loaded, skipped


def load_in_process(app, scenario):
    """Load the scenario into app's database through the client and a loopback server; return (loaded, skipped).

    Nothing is started, and nothing changes, when every study is already there. Otherwise a one-off
    admin token (admins may back-date) does the loading and is revoked afterwards.
    """
    from abate_client import Client

    titles = [spec["title"] for spec in scenario["studies"]]
    with db.database.connection_context():
        present = {study.title for study in Study.select(Study.title).where(Study.title.in_(titles))}
        if present == set(titles):
            return [], titles
        token, secret = create_token(DEMO_TOKEN_NAME, "admin")
    try:
        with served_in_thread(app, ident="abate-demo") as base_url, Client(base_url, token=secret, timeout=30) as api:
            return load_scenario(api, scenario)
    finally:
        with db.database.connection_context():
            revoke_token(token.id)
