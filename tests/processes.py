"""Run `abate` as real subprocesses: one-shot commands, served processes and schedulers, stopped or killed."""

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import requests

ROOT = Path(__file__).resolve().parents[1]
ABATE = str(Path(sys.executable).with_name("abate"))


def abate_environment(url, tmp_path, **settings):
    """The variables an `abate` process needs: this database, the test's instance folder, ABATE_<name> settings."""
    return {
        **os.environ,
        "ABATE_DATABASE_URL": url,
        "ABATE_INSTANCE_PATH": str(tmp_path / "instance"),
        # Output of a process stopped by a signal is read back; nothing may wait in a buffer.
        "PYTHONUNBUFFERED": "1",
        **{f"ABATE_{name}": str(value) for name, value in settings.items()},
    }


def mail_settings(smtp_server):
    """The settings that send reminders to a test SMTP server on loopback, without TLS, dated in UTC."""
    return {"SMTP_HOST": "127.0.0.1", "SMTP_PORT": smtp_server.port, "SMTP_STARTTLS": 0, "REMINDER_TIMEZONE": "UTC"}


def run_abate(env, *args, check=True):
    """Run `abate ARGS` to completion; return the completed process."""
    return subprocess.run([ABATE, *args], env=env, cwd=ROOT, capture_output=True, text=True, timeout=60, check=check)


def admin_secret(env):
    """Migrate the schema and return a new admin token's secret, as an operator gets one."""
    run_abate(env, "db", "upgrade")
    return run_abate(env, "token", "create", "--name", "processes", "--role", "admin").stdout.splitlines()[-1]


def free_port():
    """A TCP port on loopback that nothing listens on right now."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def wait_for(condition, seconds):
    """Poll condition until it holds or seconds pass; return its last value."""
    deadline = time.monotonic() + seconds
    while not condition() and time.monotonic() < deadline:
        time.sleep(0.02)
    return condition()


def answers(url):
    """Whether url answers 200 now."""
    try:
        return requests.get(url, timeout=2).status_code == 200
    except requests.ConnectionError:
        return False


class AbateProcess:
    """A long-running `abate` command whose output goes to a file (a pipe nobody reads could fill and block it)."""

    def __init__(self, env, *args, log_path):
        self.log_path = log_path
        with open(log_path, "wb") as log:
            self.process = subprocess.Popen([ABATE, *args], env=env, cwd=ROOT, stdout=log, stderr=subprocess.STDOUT)

    @property
    def output(self):
        """Everything the process printed so far."""
        return Path(self.log_path).read_text(encoding="utf-8", errors="replace")

    def running(self):
        """Whether the process has not ended."""
        return self.process.poll() is None

    def kill(self):
        """SIGKILL: no handler runs, no transaction is finished, as when the machine loses power."""
        self.process.send_signal(signal.SIGKILL)
        self.process.wait(timeout=10)

    def stop(self):
        """SIGTERM, as a service manager stops it; return its output."""
        self.process.send_signal(signal.SIGTERM)
        try:
            self.process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.kill()
        return self.output


class Served(AbateProcess):
    """`abate serve` on a free loopback port (with the scheduler in it, or not), returned once /readyz answers."""

    def __init__(self, env, log_path, scheduler=False):
        port = free_port()
        self.base = f"http://127.0.0.1:{port}"
        options = [] if scheduler else ["--no-scheduler"]
        super().__init__(env, "serve", "--port", str(port), *options, log_path=log_path)
        deadline = time.monotonic() + 30
        while not answers(f"{self.base}/readyz"):
            assert self.running() and time.monotonic() < deadline, f"abate serve did not come up:\n{self.output}"
            time.sleep(0.1)


class Processes:
    """The processes a test started; every one still running is killed at the end."""

    def __init__(self, tmp_path):
        self._tmp_path = tmp_path
        self._started = []

    def _log(self):
        return self._tmp_path / f"process-{len(self._started)}.log"

    def serve(self, env, scheduler=False):
        """Start a served process; with scheduler, the reminder scheduler runs in it too."""
        served = Served(env, self._log(), scheduler)
        self._started.append(served)
        return served

    def start(self, env, *args):
        """Start `abate ARGS` (e.g. scheduler)."""
        process = AbateProcess(env, *args, log_path=self._log())
        self._started.append(process)
        return process

    def kill_all(self):
        """Kill whatever still runs."""
        for process in self._started:
            if process.running():
                process.kill()
