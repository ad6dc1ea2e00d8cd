"""The client installs into a fresh virtualenv with requests alone, and works there without Flask or peewee."""

import json
import os
import shutil
import subprocess
import venv
from pathlib import Path

import pytest

CLIENT_DIR = Path(__file__).resolve().parents[2] / "clients" / "python"
# Imported in the new virtualenv: the client and its helper work; the service's libraries are absent.
CHECK = """
import importlib.util, json, abate_client
from abate_client import Client, verify_signature
with Client("http://127.0.0.1:1", timeout=1) as client:
    pass
print(json.dumps({
    "client": abate_client.__file__,
    "absent": [name for name in ("flask", "peewee", "marshmallow", "abate") if importlib.util.find_spec(name) is None],
}))
"""


def test_the_client_installs_in_a_fresh_virtualenv_without_flask_or_peewee(tmp_path):
    environment = tmp_path / "venv"
    try:
        venv.EnvBuilder(with_pip=True).create(environment)
    except (OSError, subprocess.CalledProcessError) as error:
        pytest.skip(f"cannot create a virtualenv with pip here: {error}")
    python = environment / ("Scripts" if os.name == "nt" else "bin") / "python"
    # A copy, so that building the package leaves nothing behind in the source tree.
    source = shutil.copytree(
        CLIENT_DIR, tmp_path / "abate-client", ignore=shutil.ignore_patterns("*.egg-info", "__pycache__", "build")
    )
    env = {**os.environ, "PIP_DISABLE_PIP_VERSION_CHECK": "1", "PYTHONNOUSERSITE": "1"}
    env.pop("PYTHONPATH", None)
    installed = subprocess.run(
        [str(python), "-m", "pip", "install", "--quiet", str(source)],
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
    )
    assert installed.returncode == 0, installed.stderr

    listed = subprocess.run(
        [str(python), "-m", "pip", "list", "--format=json"], capture_output=True, text=True, env=env, timeout=60
    )
    names = {item["name"].lower() for item in json.loads(listed.stdout)}
    assert {"abate-client", "requests"} <= names and not names & {"flask", "peewee", "abate"}

    checked = subprocess.run(
        [str(python), "-c", CHECK], capture_output=True, text=True, env=env, cwd=tmp_path, timeout=60
    )
    assert checked.returncode == 0, checked.stderr
    result = json.loads(checked.stdout)
    assert Path(result["client"]).is_relative_to(environment)
    assert result["absent"] == ["flask", "peewee", "marshmallow", "abate"]
