"""The `abate` command: serve, database upgrades, tokens, the demo and the OpenAPI document."""

import contextlib
import json
from pathlib import Path

import click

from abate import create_app, db

DEFAULT_DEMO_FILE = Path("demo") / "scenario.json"


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
@click.pass_obj
def serve(app, host, port, threads):
    """Apply pending migrations, then serve the API with waitress (a production WSGI server)."""
    import waitress

    with _connected(app):
        applied = db.upgrade()
    for version, name in applied:
        click.echo(f"applied migration {version:04d} {name}")
    click.echo(f"Abate serving on http://{host}:{port}/v1/ (OpenAPI: http://{host}:{port}/v1/openapi.json)")
    waitress.serve(app, host=host, port=port, threads=threads, ident="abate")


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
    from abate.domain.tokens import tokens_query, token_view
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
    """Load the demo studies (once; a second load changes nothing)."""
    from abate.demo import load_scenario

    path = path or DEFAULT_DEMO_FILE
    with _connected(app):
        db.upgrade()
        loaded, skipped = load_scenario(json.loads(path.read_text(encoding="utf-8")))
    for title in loaded:
        click.echo(f"loaded demo study {title!r}")
    for title in skipped:
        click.echo(f"demo study {title!r} is already there; left as it is")


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
