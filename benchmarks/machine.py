"""What a benchmark run ran on: CPU, cores, memory, OS, Python and database versions (no host names or paths)."""

import os
import platform
import sqlite3
from urllib.parse import urlsplit

DISPLAY_NAMES = {"sqlite": "SQLite", "postgresql": "PostgreSQL"}


def _cpu_model():
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as cpuinfo:
            for line in cpuinfo:
                if line.lower().startswith("model name"):
                    return line.partition(":")[2].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine() or "unknown"


def _memory():
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return "unknown"
    return f"{total / 2**30:.1f} GiB"


def _operating_system():
    try:
        name = platform.freedesktop_os_release().get("PRETTY_NAME")
    except OSError:
        name = None
    kernel = f"{platform.system()} {platform.release()}"
    return f"{name} ({kernel})" if name else kernel


def postgresql_version(database_url):
    """The server version behind a postgresql:// URL, or None when it does not answer within a few seconds."""
    import psycopg2

    try:
        connection = psycopg2.connect(database_url, connect_timeout=3)
    except psycopg2.OperationalError:
        return None
    try:
        with connection.cursor() as cursor:
            cursor.execute("SHOW server_version")
            return cursor.fetchone()[0]
    finally:
        connection.close()


def database_label(database_url):
    """How the table names a database: its kind, never its URL (which may carry a password)."""
    scheme = "sqlite" if database_url is None else urlsplit(database_url).scheme
    return "postgresql" if scheme.startswith("postgres") else scheme


def sqlite_version():
    """The version of the SQLite library this Python uses."""
    return sqlite3.sqlite_version


def load_average():
    """The 1, 5 and 15 minute load averages as text ("unknown" where the system keeps none)."""
    try:
        return ", ".join(f"{value:.2f}" for value in os.getloadavg())
    except (OSError, AttributeError):
        return "unknown"


def describe(database_versions, load_at_start):
    """[(property, value)] of this machine, the given {database label: version} and the load when the run began."""
    cores = os.cpu_count() or 0
    usable = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else cores
    return [
        ("CPU", _cpu_model()),
        ("cores", f"{cores} logical" + (f", {usable} usable by this run" if usable != cores else "")),
        ("memory", _memory()),
        ("operating system", _operating_system()),
        ("Python", f"{platform.python_implementation()} {platform.python_version()}"),
        *((f"{DISPLAY_NAMES.get(label, label)} version", version) for label, version in database_versions.items()),
        # Other work on the machine slows both sides of a ratio, but not always alike.
        ("load average (1, 5, 15 min) when the run began", load_at_start),
    ]
