"""Configuration: defaults, then ABATE_* environment variables, then the test config."""

import pytest

from abate.config import load_config


def test_environment_overrides_defaults_and_test_config_overrides_both():
    config = load_config(
        {"BASE_URL": "http://test"}, environ={"ABATE_BASE_URL": "http://env", "ABATE_DB_POOL_SIZE": "3"}
    )
    assert config["BASE_URL"] == "http://test" and config["DB_POOL_SIZE"] == 3


@pytest.mark.parametrize(("text", "value"), [("true", True), ("1", True), ("Yes", True), ("off", False), ("0", False)])
def test_switches_read_the_usual_spellings(text, value):
    assert load_config(environ={"ABATE_REMINDER_SKIP_WEEKENDS": text})["REMINDER_SKIP_WEEKENDS"] is value


def test_an_unreadable_switch_is_refused_with_its_name():
    with pytest.raises(ValueError, match="ABATE_SMTP_STARTTLS"):
        load_config(environ={"ABATE_SMTP_STARTTLS": "maybe"})


def test_the_default_database_is_a_sqlite_file_under_the_instance_folder(tmp_path):
    config = load_config(environ={"ABATE_INSTANCE_PATH": str(tmp_path)})
    assert config["DATABASE_URL"] == f"sqlite:///{tmp_path / 'abate.sqlite3'}"
