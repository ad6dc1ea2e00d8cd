"""Plain-Python domain layer: scoring, studies, modes, actions, history, reminders, webhooks, import and export,
criticality and observed failures; no Flask here."""
