"""Plain-Python domain layer: scoring, scales, studies, modes and risk events; no Flask here."""
