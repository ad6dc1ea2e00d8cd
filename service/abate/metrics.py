"""Prometheus metrics of one app: request counters kept in memory, outbox and scheduler figures read at scrape time."""

import datetime

import peewee as pw
from prometheus_client import CollectorRegistry, Counter, Histogram, generate_latest
from prometheus_client.core import GaugeMetricFamily

from abate.domain.clock import utcnow
from abate.domain.reminders import REMINDER_STATUSES
from abate.domain.scheduler_runs import last_runs
from abate.domain.webhooks import DELIVERY_STATUSES
from abate.models import Reminder, WebhookDelivery

EXTENSION = "abate.metrics"
# The text exposition format 0.0.4 (prometheus.io, "Exposition formats"), which every Prometheus reads.
CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"
# Methods the API answers; any other is counted as "other", so that made-up methods add no series.
KNOWN_METHODS = frozenset({"GET", "HEAD", "POST", "PUT", "PATCH", "DELETE", "OPTIONS"})
# Requests that matched no route (404, 405) share one label instead of one per path sent.
UNMATCHED_ROUTE = "unmatched"
REQUEST_LABELS = ("route", "method", "status")


class AppMetrics:
    """One app's registry (tests build many apps, so never the global one) and its request metrics."""

    def __init__(self):
        self.registry = CollectorRegistry()
        self.requests = Counter("abate_http_requests", "HTTP requests answered", REQUEST_LABELS, registry=self.registry)
        self.latency = Histogram(
            "abate_http_request_duration_seconds",
            "Time from the first request hook to the response, body streaming not included",
            REQUEST_LABELS,
            registry=self.registry,
        )
        self.registry.register(DatabaseFigures())
        # (route, method, status) -> its counter and histogram; as few as the labels allow, found without a lock.
        self._series = {}

    def observe_request(self, route, method, status, seconds):
        """Count one answered request under its route template, method and status."""
        labels = (route or UNMATCHED_ROUTE, method if method in KNOWN_METHODS else "other", status)
        series = self._series.get(labels)
        if series is None:
            series = self._series[labels] = (self.requests.labels(*labels), self.latency.labels(*labels))
        series[0].inc()
        series[1].observe(seconds)

    def exposition(self):
        """Every metric in the text exposition format."""
        return generate_latest(self.registry)


def _counts_by_status(model, statuses):
    counted = dict(model.select(model.status, pw.fn.COUNT(model.id)).group_by(model.status).tuples())
    # Every known status is written, 0 included, so that a series does not vanish when its rows do.
    return {status: counted.pop(status, 0) for status in statuses} | counted


def _due_count(model, now):
    return model.select().where((model.status == "pending") & (model.next_attempt_at <= now)).count()


def _timestamp(moment):
    return moment.replace(tzinfo=datetime.UTC).timestamp()


class DatabaseFigures:
    """A custom collector: outbox rows by status, the due backlog and the last scheduler runs, read when scraped."""

    def __init__(self, clock=utcnow):
        self.clock = clock

    def collect(self):
        """Yield the gauges from the database (a scrape runs in a request, with its connection)."""
        now = self.clock()
        reminders = GaugeMetricFamily("abate_reminders", "Reminder outbox rows by status", labels=["status"])
        for status, count in _counts_by_status(Reminder, REMINDER_STATUSES).items():
            reminders.add_metric([status], count)
        yield reminders
        deliveries = GaugeMetricFamily("abate_webhook_deliveries", "Webhook outbox rows by status", labels=["status"])
        for status, count in _counts_by_status(WebhookDelivery, DELIVERY_STATUSES).items():
            deliveries.add_metric([status], count)
        yield deliveries
        backlog = GaugeMetricFamily(
            "abate_outbox_backlog",
            "Pending rows whose (re)try time has come and that no sender has taken yet",
            labels=["outbox"],
        )
        backlog.add_metric(["reminders"], _due_count(Reminder, now))
        backlog.add_metric(["webhooks"], _due_count(WebhookDelivery, now))
        yield backlog
        yield from _scheduler_families(last_runs())


def _scheduler_families(runs):
    started = GaugeMetricFamily(
        "abate_scheduler_last_run_started_timestamp_seconds", "When each job's last run started", labels=["job"]
    )
    finished = GaugeMetricFamily(
        "abate_scheduler_last_run_finished_timestamp_seconds", "When each job's last run finished", labels=["job"]
    )
    success = GaugeMetricFamily(
        "abate_scheduler_last_run_success", "1 if each job's last run went well, 0 if it failed", labels=["job"]
    )
    for run in runs:
        started.add_metric([run.job], _timestamp(run.started_at))
        finished.add_metric([run.job], _timestamp(run.finished_at))
        success.add_metric([run.job], 1 if run.outcome == "ok" else 0)
    return started, finished, success
