"""Whole-database backup and restore: SQLite by its online backup API, PostgreSQL by pg_dump/pg_restore."""

import shutil
import sqlite3
import subprocess
from pathlib import Path
from urllib.parse import parse_qsl, unquote, urlsplit


class BackupRefused(RuntimeError):
    """A backup or restore that would lose data or cannot run here."""


def sqlite_path(url):
    """The file behind a sqlite:// URL, spelled as db.open_database reads it."""
    path = urlsplit(url).path
    return Path(unquote(path[1:] if path.startswith("/") else path))


def _has_tables(connection):
    return connection.execute("SELECT count(*) FROM sqlite_master WHERE type = 'table'").fetchone()[0] > 0


def _copy(source_path, target_path):
    # The online backup API copies a consistent snapshot page by page while other connections
    # keep writing (https://www.sqlite.org/backup.html); a plain file copy of a WAL database may not.
    source = sqlite3.connect(source_path)
    target = sqlite3.connect(target_path)
    try:
        source.backup(target)
    finally:
        target.close()
        source.close()


def _pg_command(url, program, *args, schema=True):
    """The pg_dump/pg_restore command line for a postgresql:// URL; the schema comes from search_path.

    A restore names no schema: the dump holds only the one it was taken of, with its CREATE SCHEMA,
    which pg_restore --schema would leave out.
    """
    parts = urlsplit(url)
    command = [program, "--host", parts.hostname or "localhost", "--port", str(parts.port or 5432)]
    if parts.username:
        command += ["--username", unquote(parts.username)]
    command += ["--dbname", unquote(parts.path.lstrip("/"))]
    options = dict(parse_qsl(parts.query)).get("options", "")
    if schema and "search_path=" in options:
        command += ["--schema", options.split("search_path=")[1].split()[0]]
    return command + list(args)


def backup(url, path):
    """Write a backup of the database behind url to path; return the command run (PostgreSQL) or None."""
    path = Path(path)
    if path.exists():
        raise BackupRefused(f"{path} exists; choose a new file")
    if url.startswith("sqlite:"):
        _copy(sqlite_path(url), path)
        return None
    command = _pg_command(url, "pg_dump", "--format=custom", "--file", str(path))
    _run(command)
    return command


def restore(url, path, force=False):
    """Restore the backup at path into the database behind url; refuse a non-empty target unless force."""
    path = Path(path)
    if not path.is_file():
        raise BackupRefused(f"no backup at {path}")
    if url.startswith("sqlite:"):
        target = sqlite_path(url)
        if target.exists() and not force:
            with sqlite3.connect(target) as connection:
                if _has_tables(connection):
                    raise BackupRefused(f"{target} already holds tables; pass --force to overwrite it")
        target.parent.mkdir(parents=True, exist_ok=True)
        _copy(path, target)
        return None
    command = _pg_command(
        url, "pg_restore", "--no-owner", *(["--clean", "--if-exists"] if force else []), str(path), schema=False
    )
    _run(command)
    return command


def _run(command):
    if shutil.which(command[0]) is None:
        raise BackupRefused(f"{command[0]} is not on PATH; run it yourself: {' '.join(command)}")
    finished = subprocess.run(command, capture_output=True, text=True)
    if finished.returncode != 0:
        raise BackupRefused(f"{command[0]} failed: {finished.stderr.strip()}")
