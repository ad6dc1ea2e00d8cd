"""Outbound webhooks: signing, the outbox and its worker, the destination guard and the subscription API."""
