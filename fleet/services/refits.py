"""Fleet refits in chunks across workers, with a progress record, and the stale sweep."""

from __future__ import annotations

from django.conf import settings
from django.db import transaction
from django.db.models import F, OuterRef, Q, Subquery
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, Reading, RefitRun

from .assessments import refit_installations, refresh_part_priors


def start_fleet_refit(*, kind: str = "fleet", chunk_size: int | None = None, force: bool = False) -> RefitRun:
    """Refresh the part priors, then queue every capacitor in service in chunks.

    Chunks are dispatched after the run record commits; in eager mode they run
    before this returns, and the run is already done. `force` refits capacitors
    whose assessment is already up to date (benchmarks, a changed model).
    """
    from fleet.tasks import dispatch_refit_chunks

    chunk_size = chunk_size or settings.FLEET_REFIT_CHUNK_SIZE
    refresh_part_priors()
    ids = list(
        FittedCapacitor.objects.filter(removed_on__isnull=True, readings__isnull=False)
        .distinct()
        .order_by("id")
        .values_list("id", flat=True)
    )
    run = RefitRun.objects.create(kind=kind, total=len(ids))
    if not ids:
        RefitRun.objects.filter(id=run.id).update(state=RefitRun.State.DONE, finished_at=timezone.now())
        run.refresh_from_db()
        return run
    chunks = [ids[i : i + chunk_size] for i in range(0, len(ids), chunk_size)]
    transaction.on_commit(lambda: dispatch_refit_chunks(run.id, chunks, force))
    return run


def refit_chunk(run_id: int, installation_ids: list[int], force: bool = False) -> None:
    """One chunk: refit (idempotent unless forced), then advance the run's progress atomically."""
    outcome = refit_installations(installation_ids, force=force)
    RefitRun.objects.filter(id=run_id).update(
        done=F("done") + len(installation_ids), readings=F("readings") + outcome.readings
    )
    RefitRun.objects.filter(id=run_id, done__gte=F("total"), state=RefitRun.State.RUNNING).update(
        state=RefitRun.State.DONE, finished_at=timezone.now()
    )


def stale_installations():
    """Capacitors in service with a reading added after their assessment was fitted.

    Two correlated subqueries on indexed columns (reading id, current
    assessment), not an aggregate over readings x assessment history.
    """
    newest = Reading.objects.filter(installation=OuterRef("pk")).order_by("-id").values("id")[:1]
    assessed = Assessment.objects.filter(installation=OuterRef("pk"), is_current=True).values("max_reading_id")[:1]
    return (
        FittedCapacitor.objects.filter(removed_on__isnull=True)
        .annotate(newest=Subquery(newest), assessed=Subquery(assessed))
        .filter(newest__isnull=False)
        .filter(Q(assessed__isnull=True) | Q(newest__gt=F("assessed")))
    )


def stale_installation_ids(limit: int = 5000) -> list[int]:
    return list(stale_installations().order_by("id").values_list("id", flat=True)[:limit])


def sweep_stale(limit: int = 5000) -> int:
    """Refit what a lost task left stale (the broker was down when it was saved)."""
    ids = stale_installation_ids(limit)
    if ids:
        refit_installations(ids)
    return len(ids)
