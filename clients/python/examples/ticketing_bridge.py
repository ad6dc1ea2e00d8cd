"""Mirror a study's corrective actions as tickets, and close each action when its ticket is closed.

The ticket system here is a stand-in of the example's own: tickets in one JSON file. Each ticketed
action carries the ticket as its external reference {system: "tickets", key: "TCK-7"}, which is how
the bridge finds it again (PUT/POST /v1/actions/by-ref/...). Run it again and again; it does each
thing once.

    export ABATE_TOKEN=...           # an editor token
    python ticketing_bridge.py --base-url http://127.0.0.1:8000 --study 3 sync
    python ticketing_bridge.py close TCK-1 --evidence "500 parts, no burr" --occurrence 3 --by "QA lab"
    python ticketing_bridge.py --base-url http://127.0.0.1:8000 --study 3 sync
"""

import argparse
import dataclasses
import json
import os
import sys
from pathlib import Path

from abate_client import AbateError, Client, Conflict

SYSTEM = "tickets"
UNFINISHED = ("open", "in_progress")
FINISHED = ("closed", "cancelled")


@dataclasses.dataclass
class Ticket:
    """A ticket as the stand-in ticket system keeps it; `synced` says Abate has heard of its closing."""

    key: str
    action_id: int
    title: str
    assignee: str
    due_date: str
    status: str = "open"
    resolution: str = ""
    resolved_by: str = ""
    result: dict = dataclasses.field(default_factory=dict)
    synced: bool = False


class TicketStore:
    """The stand-in ticket system: tickets in a JSON file, keyed TCK-1, TCK-2, ..."""

    def __init__(self, path):
        self.path = Path(path)
        data = json.loads(self.path.read_text()) if self.path.exists() else []
        self.tickets = {item["key"]: Ticket(**item) for item in data}

    def save(self):
        """Write every ticket back to the file (through a temporary file, so a crash leaves the old one)."""
        scratch = self.path.with_suffix(".tmp")
        scratch.write_text(json.dumps([dataclasses.asdict(ticket) for ticket in self.tickets.values()], indent=2))
        scratch.replace(self.path)

    def open(self, action_id, title, assignee, due_date):
        """Open a ticket for an action and save it."""
        key = f"TCK-{len(self.tickets) + 1}"
        self.tickets[key] = Ticket(key, action_id, title, assignee, due_date)
        self.save()
        return self.tickets[key]

    def for_action(self, action_id):
        """The ticket opened for this action, or None."""
        return next((ticket for ticket in self.tickets.values() if ticket.action_id == action_id), None)

    def close(self, key, resolution, resolved_by="", result=None, *, synced=False):
        """Close a ticket as its assignee would: with what was done and the ratings verified afterwards."""
        ticket = self.tickets[key]
        ticket.status, ticket.resolution, ticket.resolved_by = "closed", resolution, resolved_by
        ticket.result, ticket.synced = dict(result or {}), synced
        self.save()
        return ticket


def _mirror(ticket, action):
    """Copy what the assignee needs from the action onto its ticket."""
    ticket.title, ticket.assignee, ticket.due_date = action.title, action.owner["email"], action.due_date.isoformat()


def open_tickets(client, store, study_id):
    """Open a ticket for each unfinished action of the study that has no reference yet; return the new tickets."""
    untracked = [
        action
        for status in UNFINISHED
        for action in client.actions.list(study_id=study_id, status=status)
        if action.external_ref is None
    ]
    opened = []
    for action in untracked:
        # A ticket left over from a run that stopped before tagging its action is reused, not doubled.
        ticket = store.for_action(action.id) or store.open(
            action.id, action.title, action.owner["email"], action.due_date.isoformat()
        )
        client.actions.update(client.actions.get(action.id), external_ref={"system": SYSTEM, "key": ticket.key})
        opened.append(ticket)
    return opened


def refresh_tickets(client, store):
    """Bring open tickets up to date with their actions; close those whose action was finished in Abate."""
    for ticket in [ticket for ticket in store.tickets.values() if ticket.status == "open"]:
        action = client.actions.get_by_ref(SYSTEM, ticket.key)
        _mirror(ticket, action)
        if action.status in FINISHED:
            store.close(ticket.key, f"{action.status} in Abate", synced=True)
    store.save()


def close_actions(client, store):
    """Close the action of every ticket closed since the last run, the resolution as evidence; return them."""
    closed = []
    for ticket in [ticket for ticket in store.tickets.values() if ticket.status == "closed" and not ticket.synced]:
        try:
            closed.append(
                client.actions.close_by_ref(
                    SYSTEM, ticket.key, ticket.resolution, ticket.result, verified_by=ticket.resolved_by
                )
            )
        except Conflict:
            # Finished in Abate meanwhile (closed or cancelled there) leaves nothing to close; any other
            # conflict (an archived study, say) needs a person, so the ticket waits for the next run.
            if client.actions.get_by_ref(SYSTEM, ticket.key).status not in FINISHED:
                raise
        ticket.synced = True
        store.save()
    return closed


def sync(client, store, study_id):
    """One round: closed tickets close their actions, open tickets follow their actions, new actions get tickets."""
    closed = close_actions(client, store)
    refresh_tickets(client, store)
    return open_tickets(client, store, study_id), closed


def _ratings(args):
    return {name: getattr(args, name) for name in ("severity", "occurrence", "detection") if getattr(args, name)}


def main(argv=None):
    """The command line: sync with Abate, or close a ticket in the stand-in store."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--base-url", default=os.environ.get("ABATE_URL", "http://127.0.0.1:8000"))
    parser.add_argument("--study", type=int, help="the study whose actions are ticketed (for sync)")
    parser.add_argument("--store", default="tickets.json", help="the stand-in ticket store's JSON file")
    commands = parser.add_subparsers(dest="command", required=True)
    commands.add_parser("sync", help="close actions of closed tickets, then open tickets for new actions")
    close = commands.add_parser("close", help="close a ticket in the stand-in store, as its assignee would")
    close.add_argument("key")
    close.add_argument("--evidence", required=True, help="what was done and how it was verified")
    close.add_argument("--by", default="", help="who verified the result")
    for rating in ("severity", "occurrence", "detection"):
        close.add_argument(f"--{rating}", type=int, help=f"verified {rating} after the action")
    args = parser.parse_args(argv)

    store = TicketStore(args.store)
    if args.command == "close":
        ticket = store.close(args.key, args.evidence, args.by, _ratings(args))
        print(f"{ticket.key} closed; the next sync closes action {ticket.action_id}")
        return 0
    token = os.environ.get("ABATE_TOKEN")
    if not token or args.study is None:
        parser.error("sync needs --study and an API token in ABATE_TOKEN")
    try:
        with Client(args.base_url, token=token) as client:
            opened, closed = sync(client, store, args.study)
    except AbateError as error:
        print(f"ticketing bridge: {error}", file=sys.stderr)
        return 1
    for ticket in opened:
        print(
            f"opened {ticket.key} for action {ticket.action_id}: {ticket.title} ({ticket.assignee}, {ticket.due_date})"
        )
    for action in closed:
        print(f"closed action {action.id} ({action.external_ref['key']})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
