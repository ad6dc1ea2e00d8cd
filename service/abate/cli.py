"""The `abate` command: serve, the scheduler, reminders, database upgrades and backups, tokens, the demo,
import and the OpenAPI document."""

import contextlib
import json
import signal
from pathlib import Path

import click

from abate import backup, create_app, db

DEFAULT_DEMO_FILE = Path("demo") / "scenario.json"
# How long stopping waits for a webhook attempt in flight; an abandoned one is retried after its lease.
WORKER_STOP_SECONDS = 5


@contextlib.contextmanager
def _connected(app):
    """One connection for the length of a command, closed on the way out."""
    db.database.connect(reuse_if_open=True)
    try:
        yield app
    finally:
        if not db.database.is_closed():
            db.database.close()


@click.group()
@click.pass_context
def main(ctx):
    """Abate: FMEA studies, failure modes and their risk, as a JSON service."""
    ctx.obj = create_app()


@main.command()
@click.option("--host", default="127.0.0.1", show_default=True)
@click.option("--port", default=8000, show_default=True, type=int)
@click.option("--threads", default=8, show_default=True, type=int, help="Worker threads of the WSGI server.")
@click.option(
    "--no-scheduler", is_flag=True, help="Run no reminder scheduler here (run `abate scheduler` on its own instead)."
)
@click.pass_obj
def serve(app, host, port, threads, no_scheduler):
    """Apply pending migrations, then serve the API with waitress (a production WSGI server)."""
    import waitress

    from abate.jobs import build_scheduler
    from abate.logs import configure_logging
    from abate.webhook_worker import WebhookWorker

    # One JSON object per line on stderr: an access line per request, the jobs' and workers' records.
    configure_logging(app.config)
    with _connected(app):
        applied = db.upgrade()
    for version, name in applied:
        click.echo(f"applied migration {version:04d} {name}")
    scheduler = None if no_scheduler else build_scheduler(app.config)
    if scheduler:
        scheduler.start()
        click.echo(_schedule_line(app.config))
    webhook_worker = WebhookWorker(app.config)
    webhook_worker.start()
    click.echo(f"Abate serving on http://{host}:{port}/v1/ (OpenAPI: http://{host}:{port}/v1/openapi.json)")
    _stop_on_signals()
    try:
        waitress.serve(app, host=host, port=port, threads=threads, ident="abate")
    finally:
        webhook_worker.stop(timeout=WORKER_STOP_SECONDS)
        if scheduler:
            scheduler.shutdown(wait=False)


def _schedule_line(config):
    return f"reminder digests daily at {config['REMINDER_TIME']} {config['REMINDER_TIMEZONE']}"


@main.command("scheduler")
@click.pass_obj
def scheduler_command(app):
    """Run the reminder scheduler in this process (with `abate serve --no-scheduler` elsewhere)."""
    from apscheduler.schedulers.blocking import BlockingScheduler

    from abate.jobs import build_scheduler
    from abate.logs import configure_logging
    from abate.webhook_worker import WebhookWorker

    # Each run logs what it recorded and sent, as JSON lines on stderr; this process has no other output.
    configure_logging(app.config)
    click.echo(_schedule_line(app.config))
    _stop_on_signals()
    webhook_worker = WebhookWorker(app.config)
    try:
        webhook_worker.start()
        build_scheduler(app.config, BlockingScheduler).start()
    except (KeyboardInterrupt, SystemExit):
        click.echo("scheduler stopped")
    finally:
        webhook_worker.stop(timeout=WORKER_STOP_SECONDS)


def _stop_on_signals():
    """SIGTERM (a service manager) and SIGINT (Ctrl-C) end a long-running command cleanly.

    Set explicitly: a process started in the background of a shell may inherit SIGINT ignored.
    """

    def stop(signum, frame):
        raise SystemExit(0)

    for signum in (signal.SIGTERM, signal.SIGINT):
        signal.signal(signum, stop)


@main.command("remind")
@click.option("--now", "run_now", is_flag=True, help="Run the reminder job now.")
@click.option("--dry-run", is_flag=True, help="Only report what would be recorded and sent.")
@click.pass_obj
def remind(app, run_now, dry_run):
    """Run the reminder job on demand: record today's digests, deliver what is pending, report it."""
    from abate.jobs import run_reminders

    if not run_now:
        raise click.UsageError("pass --now to run the reminder job now")
    with _connected(app):
        report = run_reminders(app.config, dry_run=dry_run)
    would = "would be " if dry_run else ""
    if report.skipped:
        click.echo(f"skipped: {report.skipped}")
    for outcome in ("recorded", "sent", "retrying", "failed"):
        for item in getattr(report, outcome):
            error = f": {item['last_error']}" if item.get("last_error") and outcome != "sent" else ""
            click.echo(f"{would}{outcome} {item['dedup_key']}{error}")
    click.echo(
        f"reminders for {report.day}: {len(report.recorded)} {would}recorded, {len(report.sent)} {would}sent, "
        f"{len(report.retrying)} retrying, {len(report.failed)} failed"
    )


@main.group("db")
def db_group():
    """Database schema."""


@db_group.command("upgrade")
@click.pass_obj
def db_upgrade(app):
    """Apply pending migrations."""
    with _connected(app):
        applied = db.upgrade()
        version = db.schema_version()
    for number, name in applied:
        click.echo(f"applied migration {number:04d} {name}")
    click.echo(f"schema at version {version}")


@db_group.command("backup")
@click.argument("path", type=click.Path(dir_okay=False, path_type=Path))
@click.pass_obj
def db_backup(app, path):
    """Write a backup of the database to PATH (SQLite: online backup API; PostgreSQL: pg_dump)."""
    try:
        command = backup.backup(app.config["DATABASE_URL"], path)
    except backup.BackupRefused as refusal:
        raise click.ClickException(str(refusal)) from refusal
    if command:
        click.echo(" ".join(command))
    click.echo(f"backup written to {path}")


@db_group.command("restore")
@click.argument("path", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--force", is_flag=True, help="Overwrite a database that already holds tables.")
@click.pass_obj
def db_restore(app, path, force):
    """Restore the backup at PATH into the configured database (empty unless --force)."""
    try:
        command = backup.restore(app.config["DATABASE_URL"], path, force=force)
    except backup.BackupRefused as refusal:
        raise click.ClickException(str(refusal)) from refusal
    if command:
        click.echo(" ".join(command))
    click.echo(f"restored {path}")


@main.group("token")
def token_group():
    """API tokens."""


@token_group.command("create")
@click.option("--name", required=True, help="Who or what uses the token, e.g. 'ticketing bridge'.")
@click.option("--role", required=True, type=click.Choice(["reader", "editor", "admin"]))
@click.pass_obj
def token_create(app, name, role):
    """Create a token; its secret is printed once, on the last line."""
    from abate.domain.tokens import create_token

    with _connected(app):
        row, secret = create_token(name, role)
    click.echo(f"token {row.id} ({row.role}) for {row.name!r}; keep the secret below, it is not shown again")
    click.echo(secret)


@token_group.command("list")
@click.pass_obj
def token_list(app):
    """List tokens: id, role, name, last use, revocation."""
    from abate.domain.tokens import token_view, tokens_query
    from abate.models import ApiToken

    with _connected(app):
        for token in map(token_view, tokens_query().order_by(ApiToken.id)):
            used = token["last_used_at"].isoformat(timespec="seconds") + "Z" if token["last_used_at"] else "never"
            revoked = f"  revoked {token['revoked_at'].isoformat(timespec='seconds')}Z" if token["revoked_at"] else ""
            click.echo(f"{token['id']:>4}  {token['role']:<6}  {token['name']}  (last used {used}){revoked}")


@token_group.command("revoke")
@click.argument("token_id", type=int)
@click.pass_obj
def token_revoke(app, token_id):
    """Revoke a token; requests with it are refused from now on."""
    from abate.domain.tokens import revoke_token
    from abate.errors import AbateError

    with _connected(app):
        try:
            token = revoke_token(token_id)
        except AbateError as error:
            raise click.ClickException(error.detail) from error
    click.echo(f"token {token.id} ({token.name!r}) revoked")


@main.group("demo")
def demo_group():
    """The invented demo scenario."""


@demo_group.command("load")
@click.option("--file", "path", type=click.Path(exists=True, dir_okay=False, path_type=Path), default=None)
@click.pass_obj
def demo_load(app, path):
    """Load the demo studies through the API client on a loopback server (once; a second load changes nothing)."""
    from abate.demo import load_in_process
    from abate.models import Study

    scenario = json.loads((path or DEFAULT_DEMO_FILE).read_text(encoding="utf-8"))
    with _connected(app):
        db.upgrade()
    loaded, skipped = load_in_process(app, scenario)
    with _connected(app):
        ids = {study.title: study.id for study in Study.select().where(Study.title.in_(loaded + skipped))}
    for title in loaded:
        click.echo(f"loaded demo study {ids[title]}: {title!r}")
    for title in skipped:
        click.echo(f"demo study {ids[title]}: {title!r} is already there; left as it is")


@main.command("import")
@click.argument("study_id", type=int)
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--sheet", default=None, help="XLSX: the sheet to read (default: the first).")
@click.option("--mapping", default=None, help='JSON object {our field: column title}, e.g. \'{"severity": "S"}\'.')
@click.option("--dry-run", is_flag=True, help="Check every row and report; write nothing.")
@click.pass_obj
def import_command(app, study_id, file, sheet, mapping, dry_run):
    """Import a CSV, XLSX or JSON export into a study: every row checked first, then all rows or none."""
    from abate.domain.importer import import_worksheet
    from abate.errors import AbateError

    try:
        mapping = json.loads(mapping) if mapping else None
    except ValueError as error:
        raise click.BadParameter(f"not JSON: {error}", param_hint="--mapping") from error
    with _connected(app), file.open("rb") as stream:
        try:
            report = import_worksheet(
                study_id, stream, file.name, actor="command line", mapping=mapping, sheet=sheet, dry_run=dry_run
            )
        except AbateError as error:
            for problem in error.errors or []:
                click.echo(_problem_line(problem), err=True)
            raise click.ClickException(error.detail) from error
    for problem in report["problems"]:
        click.echo(_problem_line(problem))
    where = f"sheet {report['sheet']!r}, " if report["sheet"] else ""
    outcome = "checked (dry run, nothing written)" if dry_run else "imported"
    click.echo(
        f"{report['file']}: {where}{report['rows']} rows {outcome}: {report['modes']} modes, "
        f"{report['actions']} actions, {len(report['problems'])} problems"
    )
    if report["problems"]:
        raise SystemExit(1)


def _problem_line(problem):
    """One problem of an import as a line: row, column and message."""
    row = f"row {problem['row']}" if problem.get("row") else "file"
    column = f", column {problem['column']!r}" if problem.get("column") else ""
    return f"{row}{column}: {problem.get('message') or problem.get('field')}"


@main.command("openapi")
@click.option("--output", type=click.Path(dir_okay=False, path_type=Path), default=None)
@click.pass_obj
def openapi(app, output):
    """Print (or write) the OpenAPI document generated from the schemas."""
    from abate.openapi import openapi_document

    text = openapi_document(app)
    if output:
        output.write_text(text, encoding="utf-8")
    else:
        click.echo(text, nl=False)
