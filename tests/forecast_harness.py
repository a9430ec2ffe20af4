"""What the end-to-end forecast tests on simulated fleets share: reading the assessments as an engineer reads
them through the API, and the issue's targets as one list of misses."""

from __future__ import annotations

from rest_framework.test import APIClient

from fleet.roles import RELIABILITY_ENGINEER
from tests.factories import make_user


def assessments_through_the_api() -> list[dict]:
    """Every assessment, page by page, as a reliability engineer reads them through the API."""
    client = APIClient()
    client.force_authenticate(make_user(RELIABILITY_ENGINEER))
    items, url = [], "/api/assessments/"
    while url:
        response = client.get(url)
        assert response.status_code == 200, response.content[:300]
        body = response.json()
        items += body["results"]
        url = body.get("next")
    return items


def issue_target_misses(*, band, before_p10, after_p90, recall, precision) -> list[str]:
    """Issue 8's targets, each one missed in words: P10-P90 coverage 80 +/- 7 points, neither tail above 15 %;
    for capacitors not yet below their limit, 365-day risk recall >= 85 % and precision >= 60 %."""
    return [
        message
        for message, failed in (
            (f"P10-P90 coverage {band:.0%} outside 73-87 %", abs(band - 0.80) > 0.07),
            (f"{before_p10:.0%} crossed before P10 (at most 15 %)", before_p10 > 0.15),
            (f"{after_p90:.0%} crossed after P90 (at most 15 %)", after_p90 > 0.15),
            (f"365-day recall {recall:.0%} (at least 85 %)", not recall >= 0.85),
            (f"365-day precision {precision:.0%} (at least 60 %)", not precision >= 0.60),
        )
        if failed
    ]
