"""Numbered schema migrations, NNNN_name.py, each with upgrade(database, migrator); see DEVELOPERS.md."""
