"""Faults: backup and restore while serving, kill -9 of the server mid-write, several instances on PostgreSQL."""
