"""Reminder e-mails: digests, delivery, the outbox API and the scheduler."""
