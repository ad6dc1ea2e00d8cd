"""Quantitative criticality (MIL-STD-1629A Task 102): a study switch and severity classes, mode inputs,
verified rates on closed actions and the criticality figures before and after each risk event."""

COLUMNS = {
    "study": (
        ("criticality_enabled", "BOOLEAN NOT NULL DEFAULT FALSE"),
        ("severity_classes", "TEXT"),
    ),
    "failure_mode": (
        ("failure_rate", "DOUBLE PRECISION"),
        ("failure_rate_unit", "VARCHAR(32)"),
        ("mode_ratio", "DOUBLE PRECISION"),
        ("effect_probability", "DOUBLE PRECISION"),
        ("operating_time", "DOUBLE PRECISION"),
        ("operating_time_unit", "VARCHAR(16)"),
    ),
    "corrective_action": (
        ("result_failure_rate", "DOUBLE PRECISION"),
        ("result_failure_rate_unit", "VARCHAR(32)"),
        ("result_mode_ratio", "DOUBLE PRECISION"),
    ),
    "risk_event": (
        ("before_criticality", "TEXT"),
        ("after_criticality", "TEXT"),
    ),
}


def upgrade(database, migrator):
    """Add the nullable criticality columns (and the study switch, off) in place on SQLite and PostgreSQL."""
    # ADD COLUMN in place: a table rebuild on SQLite would trip the foreign keys held on these tables.
    for table, columns in COLUMNS.items():
        for name, definition in columns:
            database.execute_sql(f"ALTER TABLE {table} ADD COLUMN {name} {definition}")
