"""Fleet refits in chunks across workers, with an honest progress record, and the stale sweep."""

from __future__ import annotations

import datetime as dt
import logging

from django.conf import settings
from django.db import transaction
from django.db.models import Exists, F, OuterRef, Q, Subquery
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, Reading, RefitChunk, RefitRun

from .assessments import refit_fitted_capacitors, refresh_part_priors
from .bulk import side_by_side
from .counts import compact_counts

QUEUE_DOWN = (
    "The task queue is unreachable ({error}), so the fleet refit did not start. Every reading is saved: once the "
    "queue is back, the sweep every 15 minutes refits each capacitor with newer readings, or start the refit again."
)
ABANDONED = (
    "No progress for {minutes} minutes: the worker running it was lost. Start the refit again; "
    "capacitors already refitted are skipped."
)
LIVE_STATES = (RefitRun.State.QUEUED, RefitRun.State.RUNNING)
log = logging.getLogger(__name__)


def queue_fleet_refit(*, kind: str = "fleet") -> RefitRun:
    """Record a queued run, then hand it to a worker.

    The record exists before the task does, so a refit queued but never started
    (its worker died, the queue was flushed) still shows, and is marked abandoned.
    With the queue unreachable the run ends failed with the reason, and
    QueueUnreachable is raised for the page to say so. Call outside a transaction.
    """
    from fleet.tasks import QueueUnreachable, refit_fleet, send

    run = RefitRun.objects.create(kind=kind, state=RefitRun.State.QUEUED, progress_at=timezone.now())
    try:
        send(refit_fleet.s(run.id))
    except QueueUnreachable as error:
        fail_run(run.id, QUEUE_DOWN.format(error=error))
        raise
    run.refresh_from_db()
    return run


def start_fleet_refit(
    *,
    kind: str = "fleet",
    chunk_size: int | None = None,
    force: bool = False,
    run_id: int | None = None,
    in_process: bool = False,
) -> RefitRun:
    """Refresh the part priors, then queue every capacitor in service in numbered chunks.

    `run_id` is a run recorded by queue_fleet_refit (a second delivery of a run
    already done does nothing). Chunks are dispatched after the run record
    commits; in eager mode they run before this returns, and the run is already
    done. `force` refits capacitors whose assessment is already up to date
    (benchmarks, a changed model). `in_process`: the chunks run here, one after
    the other, whether or not a broker is set (the demo, which must be whole when
    it says so, with or without a worker running).
    """
    from fleet.tasks import QueueUnreachable, dispatch_refit_chunks

    if run_id is not None and RefitRun.objects.filter(id=run_id, state=RefitRun.State.DONE).exists():
        return RefitRun.objects.get(id=run_id)
    chunk_size = chunk_size or settings.FLEET_REFIT_CHUNK_SIZE
    _, ids = side_by_side(refresh_part_priors, _read_capacitors_to_refit)
    now = timezone.now()
    started = dict(state=RefitRun.State.RUNNING, total=len(ids), progress_at=now, finished_at=None, message="")
    if run_id is None or not RefitRun.objects.filter(id=run_id).update(**started):
        run_id = RefitRun.objects.create(kind=kind, **started).id
    if not ids:
        RefitRun.objects.filter(id=run_id).update(state=RefitRun.State.DONE, finished_at=now)
        return RefitRun.objects.get(id=run_id)
    chunks = [ids[i : i + chunk_size] for i in range(0, len(ids), chunk_size)]
    if in_process:
        for number, chunk in enumerate(chunks):
            refit_chunk(run_id, number, chunk, force)
        return RefitRun.objects.get(id=run_id)

    def dispatch():
        try:
            dispatch_refit_chunks(run_id, chunks, force)
        except QueueUnreachable as error:
            fail_run(run_id, QUEUE_DOWN.format(error=error))

    transaction.on_commit(dispatch)
    return RefitRun.objects.get(id=run_id)


def _read_capacitors_to_refit() -> list[int]:
    """The capacitors in service with a reading, in id order."""
    return list(
        FittedCapacitor.objects.filter(removed_on__isnull=True)
        .filter(Exists(Reading.objects.filter(fitted_capacitor=OuterRef("pk"))))
        .order_by("id")
        .values_list("id", flat=True)
    )


def refit_chunk(run_id: int, number: int, fitted_capacitor_ids: list[int], force: bool = False) -> None:
    """One chunk: refit (idempotent unless forced), then record it once.

    The chunk's row is unique by (run, number); the run's counts move only when
    that row is new, in the same transaction, so a chunk delivered again after
    its worker died (acks_late) refits nothing new and counts nothing twice.
    """
    outcome = refit_fitted_capacitors(fitted_capacitor_ids, force=force, part_size=settings.FLEET_REFIT_PART_SIZE)
    now = timezone.now()
    with transaction.atomic():
        if not list(RefitRun.objects.select_for_update().filter(id=run_id).values_list("id", flat=True)):
            return  # the run was deleted while its chunk waited
        _, new = RefitChunk.objects.get_or_create(
            run_id=run_id,
            number=number,
            defaults={"capacitors": len(fitted_capacitor_ids), "readings": outcome.readings},
        )
        if not new:
            return
        RefitRun.objects.filter(id=run_id).update(
            done=F("done") + len(fitted_capacitor_ids), readings=F("readings") + outcome.readings, progress_at=now
        )
        finished = (
            RefitRun.objects.filter(id=run_id, done__gte=F("total"))
            .exclude(state=RefitRun.State.DONE)
            .update(state=RefitRun.State.DONE, finished_at=now, message="")
        )
    if finished:
        compact_counts()  # the run's chunks added their changes to the counts: sum them up
        prune_assessment_history(now)


def prune_assessment_history(now: dt.datetime | None = None) -> int:
    """Delete the superseded assessments made more than FLEET_ASSESSMENT_HISTORY_DAYS before `now` (0: keep
    every one); returns how many. Run when a fleet refit finishes.

    Every refit writes a new assessment a capacitor and keeps the one before it, superseded: a nightly
    refit of 150,000 capacitors adds about 230 MB a night on PostgreSQL, 80 GB a year. They are derived
    from the readings, which are kept for good, and once superseded only the admin lists them; a
    capacitor's current assessment (which carries when its risk level last changed, and from what) is
    never deleted, however old, so a removed capacitor keeps its last one.
    """
    days = settings.FLEET_ASSESSMENT_HISTORY_DAYS
    if days <= 0:
        return 0
    made_before = (now or timezone.now()) - dt.timedelta(days=days)
    deleted, _ = Assessment.objects.filter(is_current=False, created_at__lt=made_before).delete()
    if deleted:
        log.info("deleted %d superseded assessments made before %s", deleted, made_before.isoformat())
    return deleted


def fail_run(run_id: int, message: str) -> None:
    RefitRun.objects.filter(id=run_id).exclude(state=RefitRun.State.DONE).update(
        state=RefitRun.State.FAILED, finished_at=timezone.now(), message=message
    )


def mark_abandoned_runs(now: dt.datetime | None = None) -> int:
    """Queued or running runs with no progress for longer than a chunk may take end as abandoned.

    Each chunk finishes (or is stopped by its hard time limit) within
    FLEET_REFIT_CHUNK_TIME_LIMIT_S, so a longer silence means no worker holds the
    run any more. A chunk that still finishes later completes the run honestly.
    """
    now = now or timezone.now()
    limit = now - dt.timedelta(seconds=settings.FLEET_REFIT_ABANDONED_AFTER_S)
    message = ABANDONED.format(minutes=round(settings.FLEET_REFIT_ABANDONED_AFTER_S / 60))
    return (
        RefitRun.objects.filter(state__in=LIVE_STATES)
        .filter(Q(progress_at__lt=limit) | Q(progress_at__isnull=True, started_at__lt=limit))
        .update(state=RefitRun.State.ABANDONED, finished_at=now, message=message)
    )


def recent_runs(count: int = 10) -> list[RefitRun]:
    """The latest runs for the refits page, lost ones marked abandoned first."""
    mark_abandoned_runs()
    return list(RefitRun.objects.order_by("-started_at")[:count])


def stale_fitted_capacitors():
    """Capacitors in service with a reading added after their assessment was fitted.

    Two correlated subqueries on indexed columns (reading id, current
    assessment), not an aggregate over readings x assessment history.
    """
    newest = Reading.objects.filter(fitted_capacitor=OuterRef("pk")).order_by("-id").values("id")[:1]
    assessed = Assessment.objects.filter(fitted_capacitor=OuterRef("pk"), is_current=True).values("max_reading_id")[:1]
    return (
        FittedCapacitor.objects.filter(removed_on__isnull=True)
        .annotate(newest=Subquery(newest), assessed=Subquery(assessed))
        .filter(newest__isnull=False)
        .filter(Q(assessed__isnull=True) | Q(newest__gt=F("assessed")))
    )


def stale_count() -> int:
    """How many capacitors in service have readings newer than their assessment, for the refits page.

    A fleet refit that finished covered every reading saved before it began, so only the
    capacitors read since then (less an hour, for a transaction still open at its start) are
    looked at, through the readings' index on when they were saved: a count that does not read
    the whole fleet. Without a finished fleet refit, every capacitor is looked at.
    """
    finished = (
        RefitRun.objects.filter(kind="fleet", state=RefitRun.State.DONE)
        .order_by("-started_at")
        .values_list("started_at", flat=True)
        .first()
    )
    stale = stale_fitted_capacitors()
    if finished is not None:
        read_since = Reading.objects.filter(created_at__gte=finished - dt.timedelta(hours=1))
        stale = stale.filter(id__in=read_since.values("fitted_capacitor_id"))
    return stale.count()


def stale_fitted_capacitor_ids(limit: int = 5000) -> list[int]:
    return list(stale_fitted_capacitors().order_by("id").values_list("id", flat=True)[:limit])


def sweep_stale(limit: int = 5000) -> int:
    """Refit what a lost task left stale (the broker was down when it was saved); mark lost runs
    abandoned; sum up the ledger of counts the refits and other writes added to since."""
    mark_abandoned_runs()
    compact_counts()
    ids = stale_fitted_capacitor_ids(limit)
    if ids:
        refit_fitted_capacitors(ids)
    return len(ids)
