"""Thin client for the Abate API (skeleton; filled in by the client work)."""
