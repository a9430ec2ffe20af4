"""Celery tasks: thin, idempotent, arguments are ids. Each calls one service."""

from __future__ import annotations

from celery import group, shared_task

from fleet.services import assessments, backtest, circuits, import_jobs, refits


@shared_task(acks_late=True)
def refit_capacitors(installation_ids: list[int]) -> int:
    return assessments.refit_installations(installation_ids).written


@shared_task(acks_late=True)
def refit_chunk(run_id: int, installation_ids: list[int], force: bool = False) -> None:
    refits.refit_chunk(run_id, installation_ids, force)


@shared_task
def refit_fleet() -> int:
    return refits.start_fleet_refit().id


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
    group(refit_chunk.s(run_id, chunk, force) for chunk in chunks).apply_async()


@shared_task(acks_late=True)
def run_backtest(backtest_id: int) -> None:
    backtest.run_backtest(backtest_id)


@shared_task
def backtest_fleet() -> int:
    return backtest.run_backtest(backtest.start_backtest(queue=False).id).id
