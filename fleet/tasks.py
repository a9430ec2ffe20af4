"""Celery tasks: thin, idempotent, arguments are ids. Each calls one service.

Also the one way to hand work to the broker (`send`, which fails fast with
QueueUnreachable) and the merging of repeated refits of one capacitor
(`claim_refits`).
"""

from __future__ import annotations

import functools
import logging

import redis
from celery import current_app, group, shared_task
from celery.exceptions import SoftTimeLimitExceeded
from django.conf import settings
from kombu.exceptions import OperationalError

from fleet.services import alerts, assessments, backtest, circuits, import_jobs, lifedata, refits

log = logging.getLogger(__name__)

# What a publish raises when the broker is down or hangs (kombu re-raises the
# transport's connection errors as its OperationalError).
QUEUE_ERRORS = (OperationalError, OSError, redis.RedisError)
PENDING_PREFIX = "fleet:refit-pending:"
PENDING_TTL_S = 5 * 60


class QueueUnreachable(Exception):
    """The broker did not take the task: the work waits until the queue is back."""


def send(signature) -> None:
    """Publish one task (or group); a broker that is down raises QueueUnreachable within about a second."""
    try:
        signature.apply_async()
    except QUEUE_ERRORS as error:
        raise QueueUnreachable(str(error) or type(error).__name__) from error


@functools.cache
def _pending_store(url: str) -> redis.Redis:
    return redis.Redis.from_url(url, socket_connect_timeout=0.5, socket_timeout=1)


def _merging() -> bool:
    return not current_app.conf.task_always_eager and (current_app.conf.broker_write_url or "").startswith(
        ("redis://", "rediss://")
    )


def claim_refits(fitted_capacitor_ids: list[int]) -> list[int]:
    """The capacitors that have no refit waiting in the queue, now marked as waiting.

    Repeated readings of one capacitor are merged into the refit already queued:
    a key per capacitor in the broker's Redis, set only if absent and expiring by
    itself. Chosen over a table of capacitors to refit because it needs no schema
    and no cleanup: a mark whose task was lost expires after PENDING_TTL_S, and the
    stale sweep refits that capacitor in the meantime. The task clears the marks
    before it reads, so a reading saved while it runs queues a fresh refit. With
    tasks in-process there is no queue and nothing to merge.
    """
    ids = [int(i) for i in fitted_capacitor_ids]
    if not ids or not _merging():
        return ids
    try:
        pipe = _pending_store(current_app.conf.broker_write_url).pipeline(transaction=False)
        for fitted_capacitor_id in ids:
            pipe.set(f"{PENDING_PREFIX}{fitted_capacitor_id}", 1, nx=True, ex=PENDING_TTL_S)
        claimed = pipe.execute()
    except redis.RedisError as error:
        raise QueueUnreachable(str(error)) from error
    return [fitted_capacitor_id for fitted_capacitor_id, fresh in zip(ids, claimed, strict=True) if fresh]


def release_refits(fitted_capacitor_ids: list[int]) -> None:
    """Clear the waiting marks (best effort: a mark left behind expires by itself)."""
    if not fitted_capacitor_ids or not _merging():
        return
    try:
        _pending_store(current_app.conf.broker_write_url).delete(
            *(f"{PENDING_PREFIX}{i}" for i in fitted_capacitor_ids)
        )
    except redis.RedisError:
        log.warning("refit marks of %d capacitors not cleared; they expire by themselves", len(fitted_capacitor_ids))


@shared_task(acks_late=True)
def refit_capacitors(fitted_capacitor_ids: list[int]) -> int:
    release_refits(fitted_capacitor_ids)
    return assessments.refit_fitted_capacitors(fitted_capacitor_ids).written


@shared_task(
    acks_late=True,
    soft_time_limit=settings.FLEET_REFIT_CHUNK_SOFT_LIMIT_S,
    time_limit=settings.FLEET_REFIT_CHUNK_TIME_LIMIT_S,
)
def refit_chunk(run_id: int, number: int, fitted_capacitor_ids: list[int], force: bool = False) -> None:
    try:
        refits.refit_chunk(run_id, number, fitted_capacitor_ids, force)
    except SoftTimeLimitExceeded:
        refits.fail_run(run_id, f"Chunk {number + 1} ran past its time limit; start the refit again.")
        raise


@shared_task
def refit_fleet(run_id: int | None = None) -> int:
    return refits.start_fleet_refit(run_id=run_id).id


@shared_task
def sweep_stale() -> int:
    return refits.sweep_stale()


@shared_task(acks_late=True)
def estimate_circuits(motor_ids: list[int]) -> int:
    return circuits.estimate_circuits(motor_ids)


@shared_task
def read_import(job_id: int) -> None:
    import_jobs.read_job(job_id)


@shared_task
def check_import(job_id: int) -> None:
    import_jobs.check_job(job_id)


@shared_task
def run_import(job_id: int, mode: str) -> None:
    import_jobs.run_job(job_id, mode)


def dispatch_refit_chunks(run_id: int, chunks: list[list[int]], force: bool = False) -> None:
    send(group(refit_chunk.s(run_id, number, chunk, force) for number, chunk in enumerate(chunks)))


@shared_task(acks_late=True)
def run_backtest(backtest_id: int) -> None:
    backtest.run_backtest(backtest_id)


@shared_task
def backtest_fleet() -> int:
    return backtest.run_backtest(backtest.start_backtest(queue=False).id).id


@shared_task
def refresh_life_fits() -> int:
    return lifedata.refresh_life_fits()


@shared_task
def refresh_tolerance_lives() -> int:
    return lifedata.refresh_tolerance_lives()


@shared_task
def send_daily_digest() -> int:
    try:
        return alerts.send_daily_digest()["emails"]
    except alerts.DigestNotSent as error:  # one line in the worker's log, not a traceback: tomorrow's sends it
        log.error("%s", error)
        return 0
