"""The reliability engineer's forecast track record: stored back-tests, and a button to run one."""

from __future__ import annotations

from django.contrib import messages
from django.contrib.auth.decorators import permission_required
from django.shortcuts import redirect, render
from django.views.decorators.http import require_POST

from .models import Backtest
from .services.track_record import request_backtest
from .services.track_record import track_record as track_record_figures


@permission_required("fleet.view_assessment", raise_exception=True)
def track_record(request):
    return render(request, "fleet/track_record.html", track_record_figures())


@require_POST
@permission_required("fleet.add_backtest", raise_exception=True)
def track_record_run(request):
    backtest = request_backtest()
    backtest.refresh_from_db()
    if backtest.state == Backtest.State.FAILED:
        messages.error(request, f"The back-test failed: {backtest.message}")
    elif backtest.state == Backtest.State.DONE:
        messages.success(request, "Back-test done. The figures below are the new ones.")
    else:
        messages.success(request, "Back-test started. Progress shows below.")
    return redirect("track_record")
