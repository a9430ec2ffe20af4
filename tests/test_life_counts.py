"""The life-data page's counts without a stored fit are the life table's: one rule for which capacitors count."""

import datetime as dt

import numpy as np
import pytest
from django.utils import timezone

from fleet.engineering.lifedata import age_in_words
from fleet.models import FittedCapacitor
from fleet.services.lifedata import life_table, part_life
from tests.factories import make_fitted_capacitor, make_motor, make_part

pytestmark = pytest.mark.django_db


def test_counts_without_a_fit_are_the_life_tables():
    """A capacitor fitted today has no age yet: the life table leaves it out, and so do the counts
    the page shows before a part has a fit (a unit of age nought is neither a failure nor a suspension:
    common practice of life-data analysis, no single source)."""
    part = make_part()
    today = timezone.localdate()
    make_fitted_capacitor(
        motor=make_motor(),
        part=part,
        fitted_on=dt.date(2022, 1, 1),
        removed_on=dt.date(2024, 6, 1),
        removal_reason=FittedCapacitor.RemovalReason.FAILED,
    )
    make_fitted_capacitor(motor=make_motor(), part=part, fitted_on=dt.date(2023, 1, 1))
    make_fitted_capacitor(motor=make_motor(), part=part, fitted_on=today)
    table = life_table(part.id)
    life = part_life(part.id, planned_cost=60.0, failure_cost=400.0)
    assert life["fit"] is None
    assert (life["failures"], life["suspensions"]) == (int(table["failed"].sum()), int((~table["failed"]).sum()))
    assert (life["failures"], life["suspensions"]) == (1, 1)


def _capacitors(part, spans):
    """Fitted capacitors of `part` on motors of their own: (fitted, removed or None, failed)."""
    for fitted_on, removed_on, failed in spans:
        reason = "" if removed_on is None else ("failed" if failed else "planned")
        make_fitted_capacitor(
            motor=make_motor(), part=part, fitted_on=fitted_on, removed_on=removed_on, removal_reason=reason
        )


def _tied_and_fittable_parts(today):
    """A part whose two failures share the oldest age (with a suspension at it: no estimate) and a part
    with four failures at three ages (the fresh-eyes import's two start-capacitor parts, ours)."""
    tied, fittable = make_part(code="TIED"), make_part(code="FITTABLE")
    _capacitors(tied, [(dt.date(2020, 1, 20), dt.date(2024, 6, 3), failed) for failed in (True, True, False)])
    _capacitors(tied, [(dt.date(2024, 6, 3), None, False)] * 3)
    _capacitors(
        fittable,
        [
            (dt.date(2021, 3, 8), dt.date(2023, 10, 10), True),
            (dt.date(2021, 3, 8), dt.date(2022, 5, 1), True),
            (dt.date(2022, 5, 1), dt.date(2023, 10, 10), True),
            (dt.date(2021, 3, 8), dt.date(2023, 10, 10), True),
        ]
        + [(dt.date(2023, 10, 10), None, False)] * 3,
    )
    return tied, fittable


def test_a_part_with_no_estimate_says_why_and_the_other_parts_are_fitted(client, engineer, planner):
    """[derived] Every failure at the oldest age holds no Weibull estimate (tests/engineering/test_lifedata.py):
    the refresh stores why for that part and fits the others; the pages name the reason, not "not fitted yet"
    nor "fewer than two failures"."""
    from django.urls import reverse

    from fleet.engineering.lifedata import fit_weibull
    from fleet.models import PartLifeFit
    from fleet.services.lifedata import DAYS_PER_YEAR, refresh_life_fits

    tied, fittable = _tied_and_fittable_parts(timezone.localdate())
    assert refresh_life_fits() == 1
    stored = PartLifeFit.objects.get(part=fittable)
    table = life_table(fittable.id)
    fit = fit_weibull(table["age_days"] / DAYS_PER_YEAR, table["failed"])
    assert (stored.beta, stored.eta_years, stored.failures) == (fit.beta, fit.eta, 4)
    assert stored.var_log_beta == fit.covariance_log[0, 0]
    no_fit = PartLifeFit.objects.get(part=tied)
    assert no_fit.beta is None and "no capacitor has outlived it" in no_fit.no_fit_reason
    client.force_login(engineer)
    body = client.get(reverse("life_data"), {"part": tied.code}).content.decode()
    assert "No Weibull fit: every failure is at the same age" in body and "Not fitted yet" not in body
    body = client.get(reverse("life_data"), {"part": fittable.code}).content.decode()
    assert "B10 life" in body and "<b>4</b> failed in service" in body
    client.force_login(planner)
    dashboard = client.get(reverse("dashboard")).content.decode()
    assert f"the life-data page says which) for {tied.code}: only the plan" in dashboard  # not for {fittable.code}


def test_a_failure_recorded_since_the_nights_estimate_is_said_beside_its_counts(client, engineer):
    """A walk: a capacitor replaced as failed after the night's estimate made the life table download list one
    failure more than the page counted, with nothing said. The page keeps the estimate's counts and says what the
    register holds now (its failures and suspensions: the life table's, [derived] as `life_table` counts them)."""
    from django.urls import reverse

    from fleet.services.lifedata import refresh_life_fits
    from fleet.services.readings import replace_capacitor

    _tied, fittable = _tied_and_fittable_parts(timezone.localdate())
    refresh_life_fits()
    client.force_login(engineer)
    body = client.get(reverse("life_data"), {"part": fittable.code}).content.decode()
    assert "<b>4</b> failed in service" in body and 'id="life-since-estimate"' not in body
    in_service = FittedCapacitor.objects.filter(part=fittable, removed_on__isnull=True).first()
    replace_capacitor(fitted_capacitor=in_service, part=fittable, removed_on=timezone.localdate(), reason="failed")
    table = life_table(fittable.id)
    body = client.get(reverse("life_data"), {"part": fittable.code}).content.decode()
    assert "<b>4</b> failed in service" in body  # the estimate's own counts, until the next night
    since = body[body.index('id="life-since-estimate"') :].split("</span>")[0]
    failed, suspended = int(table["failed"].sum()), int((~table["failed"]).sum())
    assert (failed, suspended) == (5, 2)
    assert f"it holds <b>{failed}</b> failed and <b>{suspended}</b> suspensions now" in since


def test_a_part_whose_refresh_fails_keeps_its_fit_and_does_not_stop_the_others(monkeypatch, caplog):
    """One part's unexpected error (a stand-in for any bug in a fit) is logged; that part keeps the fit it had,
    and every other part is refitted on the same run [derived]."""
    from fleet.models import PartLifeFit, PartToleranceLife
    from fleet.services import lifedata

    today = timezone.localdate()
    tied, fittable = _tied_and_fittable_parts(today)
    broken = make_part(code="BROKEN")
    _capacitors(broken, [(dt.date(2019, 1, 1), dt.date(2020 + i, 1, 1), True) for i in range(3)])
    lifedata.refresh_life_fits()
    before = PartLifeFit.objects.get(part=broken)
    _capacitors(fittable, [(dt.date(2022, 1, 1), dt.date(2022, 9, 1), True)])  # a fifth failure since
    real_fit = lifedata.fit_weibull

    def fails_on_three_failures(years, failed):
        if failed.sum() == 3:
            raise np.linalg.LinAlgError("Singular matrix")
        return real_fit(years, failed)

    monkeypatch.setattr(lifedata, "fit_weibull", fails_on_three_failures)
    lifedata.refresh_life_fits()
    assert "life fit of part" in caplog.text
    # Its three failures in service are its capacitors' leaving tolerance too: that refit fails alike, logged,
    # and the other parts' are stored all the same.
    assert "tolerance life of part" in caplog.text
    assert PartToleranceLife.objects.get(part=fittable).left_tolerance == 5
    kept = PartLifeFit.objects.get(part=broken)
    assert (kept.beta, kept.eta_years, kept.fitted_at) == (before.beta, before.eta_years, before.fitted_at)
    assert PartLifeFit.objects.get(part=fittable).failures == 5
    assert PartLifeFit.objects.get(part=tied).no_fit_reason


def test_a_parts_age_at_leaving_tolerance_from_its_readings(client):
    """Each capacitor's age at its first reading below the tolerance limit as measured (or a defect seen, or a
    failure in service), else a suspension at its last reading; a corrected reading counts by its correction.
    The stored Weibull is SciPy's censored maximum-likelihood fit of those ages (a reference library), and the
    life-data and capacitor pages show its median and B10."""
    from scipy import stats

    from fleet.roles import RELIABILITY_ENGINEER
    from fleet.services.assessments import refit_fitted_capacitors
    from fleet.services.lifedata import DAYS_PER_YEAR, refresh_life_fits, tolerance_life, tolerance_life_table
    from tests.factories import make_reading, make_user

    part = make_part(rated_uf=100.0, tolerance_minus_pct=10)  # limit 90 uF
    start = dt.date(2020, 1, 1)

    def at(days):
        return timezone.make_aware(dt.datetime.combine(start + dt.timedelta(days=days), dt.time(10)))

    def fitted(**kwargs):
        return make_fitted_capacitor(motor=make_motor(), part=part, fitted_on=start, **kwargs)

    expected = []  # (age in days, left tolerance)
    for k, out_day in enumerate((300, 420, 510, 640, 800)):  # read below 90 uF at out_day
        capacitor = fitted()
        make_reading(capacitor, taken_at=at(out_day - 90), capacitance_uf=93.0)
        make_reading(capacitor, taken_at=at(out_day), capacitance_uf=89.5 - k)
        make_reading(capacitor, taken_at=at(out_day + 30), capacitance_uf=88.0)
        expected.append((out_day, True))
    bulged = fitted()
    make_reading(bulged, taken_at=at(200), capacitance_uf=99.0)
    make_reading(bulged, taken_at=at(380), capacitance_uf=97.0, condition="bulged")
    expected.append((380, True))
    failed = fitted(removed_on=start + dt.timedelta(days=560), removal_reason=FittedCapacitor.RemovalReason.FAILED)
    make_reading(failed, taken_at=at(400), capacitance_uf=95.0)
    expected.append((560, True))
    for last_day in (700, 900):  # within at every reading: suspensions at the last one
        capacitor = fitted()
        make_reading(capacitor, taken_at=at(last_day - 200), capacitance_uf=96.0)
        make_reading(capacitor, taken_at=at(last_day), capacitance_uf=92.0)
        expected.append((last_day, False))
    corrected = fitted()
    slip = make_reading(corrected, taken_at=at(450), capacitance_uf=9.4)  # a slip, corrected below
    make_reading(corrected, taken_at=at(451), capacitance_uf=94.0, supersedes=slip)
    expected.append((451, False))
    fitted()  # never read, not failed: not known either way, left out

    table = tolerance_life_table()
    table = table[table["part_id"] == part.id].sort_values(["age_days", "left"])
    expected.sort()
    assert table["age_days"].tolist() == [float(age) for age, _ in expected]
    assert table["left"].tolist() == [left for _, left in expected]

    refresh_life_fits()
    life = tolerance_life(part.id)
    years = np.array([age for age, _ in expected], float) / DAYS_PER_YEAR
    left = np.array([flag for _, flag in expected], bool)
    beta, _, eta = stats.weibull_min.fit(stats.CensoredData.right_censored(years, ~left), floc=0)
    assert (life["left"], life["within"]) == (7, 3)
    assert life["fit"].beta == pytest.approx(beta, rel=1e-3)
    assert life["fit"].eta == pytest.approx(eta, rel=1e-3)
    assert life["median"] == pytest.approx(eta * np.log(2) ** (1 / beta), rel=1e-3)

    client.force_login(make_user(RELIABILITY_ENGINEER))
    page = client.get(f"/life/?part={part.code}").content.decode()
    assert "Half have left by" in page and age_in_words(life["median"]) in page
    page = client.get(f"/fitted-capacitors/{corrected.id}/").content.decode()
    assert "part-tolerance-life" not in page  # no assessment yet: the comparison stands beside a forecast
    refit_fitted_capacitors([corrected.id])
    page = client.get(f"/fitted-capacitors/{corrected.id}/").content.decode()
    assert 'id="part-tolerance-life"' in page and age_in_words(life["b10"]) in page


def test_a_part_with_fewer_than_two_capacitors_out_of_tolerance_says_so(client):
    from fleet.services.lifedata import refresh_life_fits, tolerance_life
    from tests.factories import make_reading

    part = make_part(rated_uf=100.0, tolerance_minus_pct=10)
    capacitor = make_fitted_capacitor(motor=make_motor(), part=part, fitted_on=dt.date(2020, 1, 1))
    make_reading(capacitor, taken_at=timezone.make_aware(dt.datetime(2021, 1, 1, 10)), capacitance_uf=85.0)
    refresh_life_fits()
    life = tolerance_life(part.id)
    assert life["fit"] is None and life["left"] == 1
    assert "fewer than two" in life["no_fit_reason"]
