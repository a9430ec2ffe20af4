"""The substitute advisor in the shell: the replacement's override, the site's stock, the API.

The fixture fan (tests/conftest.py) is the demo's example fan, the motor of
tests/engineering/test_operating_point.py, with its 4 uF 450 V film run capacitor. Its figures are
the model's [derived]; the rules' sources sit in fleet/engineering/substitutes.py and its tests.
"""

import datetime as dt
from types import SimpleNamespace

import pytest
from django.db.models import Min
from django.template.defaultfilters import floatformat
from django.urls import reverse
from django.utils import timezone

from fleet.engineering.motor import MotorCircuit, two_winding_running
from fleet.engineering.substitutes import advise
from fleet.models import FittedCapacitor, Motor, SiteMembership, SiteStock
from fleet.roles import RELIABILITY_ENGINEER, TECHNICIAN, scope_to_user
from fleet.services import substitutes
from fleet.services.counts import compact_counts
from fleet.services.readings import replace_capacitor
from tests.factories import (
    EXAMPLE_FAN_CIRCUIT,
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_site,
    make_user,
    quarterly_readings,
)

from .test_api import client_for

pytestmark = pytest.mark.django_db


def post_replacement(client, fitted_capacitor, part, **extra):
    data = {
        "part": part.id,
        "removed_on": timezone.localdate().isoformat(),
        "removal_reason": "failed",
        **extra,
    }
    return client.post(reverse("replace", args=[fitted_capacitor.id]), data)


def signed_in_client(client, user):
    client.force_login(user)
    return client


def test_an_unsuitable_part_needs_the_override_and_a_reason_which_are_recorded(
    client, technician, fan_fitted_capacitor
):
    """[derived] 4.8 uF on the fan is outside the run band (+/-10 %, [trade]): unsuitable, so the form refuses it
    without the tick box, then without a reason, and keeps both once given."""
    signed_in_client(client, technician)
    big = make_part(code="FILM-4U8", rated_uf=4.8)
    refused = post_replacement(client, fan_fitted_capacitor, big)
    assert refused.status_code == 200
    expected = "FILM-4U8 is unsuitable here (4.8 µF is outside the run band (the design value 4 µF ± 10%), 3.6-4.4 µF)."
    assert f"{expected} Tick" in refused.content.decode()
    fan_fitted_capacitor.refresh_from_db()
    assert fan_fitted_capacitor.removed_on is None  # nothing saved half-way
    no_reason = post_replacement(client, fan_fitted_capacitor, big, substitute_override="on", override_reason="  ")
    assert "Say why this part is fitted against the advice." in no_reason.content.decode()
    assert FittedCapacitor.objects.filter(motor=fan_fitted_capacitor.motor).count() == 1
    saved = post_replacement(
        client, fan_fitted_capacitor, big, substitute_override="on", override_reason="only part in the van"
    )
    assert saved.status_code == 302
    successor = FittedCapacitor.objects.get(motor=fan_fitted_capacitor.motor, removed_on__isnull=True)
    assert successor.part == big and successor.substitute_override
    assert successor.override_reason == "only part in the van"
    page = client.get(reverse("fitted_capacitor", args=[successor.id])).content.decode()
    assert "Fitted against the substitute advice" in page and "only part in the van" in page


def test_a_reason_typed_without_the_override_is_refused_not_dropped(client, technician, fan_fitted_capacitor):
    """A reason is kept only with the tick: typed beside a part that needs no override, the form comes back
    with it as typed, naming the box, and saves nothing, rather than fitting the part and losing the words."""
    signed_in_client(client, technician)
    refused = post_replacement(
        client, fan_fitted_capacitor, fan_fitted_capacitor.part, override_reason="only part in the van"
    )
    assert refused.status_code == 200
    page = refused.content.decode()
    assert "A reason is kept only with the override ticked" in page
    assert "only part in the van</textarea>" in page  # as typed
    fan_fitted_capacitor.refresh_from_db()
    assert fan_fitted_capacitor.removed_on is None
    assert FittedCapacitor.objects.filter(motor=fan_fitted_capacitor.motor).count() == 1
    blank = post_replacement(client, fan_fitted_capacitor, fan_fitted_capacitor.part, override_reason=" ")
    assert blank.status_code == 302


def test_the_override_ticked_for_a_part_that_needs_none_is_refused_not_kept_as_a_stop_gap(
    client, technician, fan_fitted_capacitor
):
    """A walk: the design part chosen with a reason typed was refused saying "tick it to fit this part against
    the advice"; ticked, the design part was kept as a stop-gap fitted against the advice, listed to swap for
    itself and counted on the plan. [ours] the override ticked for the design part, or for a suitable one (a
    second 4 uF 450 V film part [derived]), is refused at the box, saying the part needs none; nothing saved."""
    signed_in_client(client, technician)
    same = make_part(code="FILM-4U0-B", rated_uf=4.0)
    for part, what in ((fan_fitted_capacitor.part, "the design part"), (same, "suitable")):
        ticked = post_replacement(
            client, fan_fitted_capacitor, part, substitute_override="on", override_reason="same as before"
        )
        page = ticked.content.decode()
        assert ticked.status_code == 200 and f"{part.code} is {what} here: it needs no override." in page
        assert "same as before</textarea>" in page  # as typed
        reason_only = post_replacement(client, fan_fitted_capacitor, part, override_reason="same as before")
        assert f"{part.code} is {what} here: it needs no override: clear this box" in reason_only.content.decode()
        assert "tick it to fit this part against the advice" not in reason_only.content.decode()
    assert FittedCapacitor.objects.filter(motor=fan_fitted_capacitor.motor).count() == 1
    assert not FittedCapacitor.objects.filter(substitute_override=True).exists()


def test_a_suitable_part_needs_no_override_and_the_screen_lists_it_first_with_the_stock(
    client, technician, fan_fitted_capacitor
):
    """[derived] a second 4 uF 450 V film part is suitable; it is listed before the unsuitable ones, with
    its figures, the quantity on site and the cautions."""
    signed_in_client(client, technician)
    same = make_part(code="FILM-4U0-B", rated_uf=4.0)
    make_part(code="FILM-2U0", rated_uf=2.0)
    make_part(code="FILM-4U2", rated_uf=4.2)
    make_part(code="FILM-4U0-400V", rated_uf=4.0, rated_voltage_v=400)  # nearer the design value, but unsuitable
    SiteStock.objects.create(site=fan_fitted_capacitor.motor.site, part=same, quantity=3)
    body = client.get(reverse("replace", args=[fan_fitted_capacitor.id])).content.decode()
    assert body.index("FILM-4U0-B") < body.index("FILM-4U2") < body.index("FILM-4U0-400V") < body.index("FILM-2U0")
    assert "3 on site" in body and "main 0.91 A" in body
    # A part with none on site says so before it is chosen (a walk learnt it only from the message after saving).
    unsuitable = body[body.index("FILM-4U0-400V") :].split("</label>")[0]
    assert "none on site" in unsuitable
    assert "Caution: capacitors store a charge that can kill" in body
    assert "FILM-2U0 + FILM-2U0" in body and "each must carry the full voltage rating" in body
    assert post_replacement(client, fan_fitted_capacitor, same).status_code == 302
    successor = FittedCapacitor.objects.get(motor=fan_fitted_capacitor.motor, removed_on__isnull=True)
    assert successor.part == same and not successor.substitute_override


def test_stock_is_decremented_and_never_below_zero(client, technician, fan_fitted_capacitor):
    """A replacement takes one from the site's stock; with none there it is still recorded, the stock stays 0
    and the message says so."""
    signed_in_client(client, technician)
    site, part = fan_fitted_capacitor.motor.site, fan_fitted_capacitor.part
    stock = SiteStock.objects.create(site=site, part=part, quantity=1)
    response = post_replacement(client, fan_fitted_capacitor, part)
    stock.refresh_from_db()
    assert stock.quantity == 0
    assert f"Stock at {site.code}: 0 of {part.code} left." in client.get(response.url).content.decode()
    successor = FittedCapacitor.objects.get(motor=fan_fitted_capacitor.motor, removed_on__isnull=True)
    again = post_replacement(client, successor, part)
    assert again.status_code == 302
    stock.refresh_from_db()
    assert stock.quantity == 0
    page = client.get(again.url).content.decode()
    assert f"No {part.code} was in stock at {site.code}: the replacement is recorded, the stock shows 0." in page


def test_api_answers_one_entry_per_candidate_with_units_in_the_names(engineer, fan_fitted_capacitor):
    make_part(code="FILM-2U0", rated_uf=2.0)
    make_part(code="ELEC-4U0", rated_uf=4.0, dielectric="electrolytic")
    body = client_for(engineer).get(reverse("api_fitted_capacitor_substitutes", args=[fan_fitted_capacitor.id])).json()
    items = {item["part_code"]: item for item in body["items"]}
    design = items[fan_fitted_capacitor.part.code]
    assert design["verdict"] == "suitable"
    for name in ("main_current_a", "aux_current_a", "line_current_a", "capacitor_voltage_v", "starting_torque_nm"):
        assert isinstance(design[name], float)
    assert isinstance(design["reasons"], list) and all(isinstance(r, str) for r in design["reasons"])
    assert items["ELEC-4U0"]["verdict"] == "unsuitable"
    assert items["FILM-2U0 + FILM-2U0"]["verdict"] == "suitable"
    assert body["items"][0]["verdict"] == "suitable"
    assert body["design"]["capacitor_voltage_v"] == pytest.approx(design["capacitor_voltage_v"])


def test_api_parts_limits_the_candidates_and_names_an_unknown_code(engineer, fan_fitted_capacitor):
    make_part(code="FILM-2U0", rated_uf=2.0)
    make_part(code="FILM-8U0", rated_uf=8.0)
    client = client_for(engineer)
    url = reverse("api_fitted_capacitor_substitutes", args=[fan_fitted_capacitor.id])
    body = client.get(url, {"parts": "FILM-8U0"}).json()
    assert [item["part_code"] for item in body["items"]] == ["FILM-8U0"]
    answer = client.get(url, {"parts": "FILM-8U0,NO-SUCH"})
    assert answer.status_code == 400
    assert "NO-SUCH" in answer.json()["parts"][0]


def test_api_is_scoped_to_the_users_sites(fan_fitted_capacitor):
    user = make_user(TECHNICIAN)
    SiteMembership.objects.create(user=user, site=make_site())
    url = reverse("api_fitted_capacitor_substitutes", args=[fan_fitted_capacitor.id])
    assert client_for(user).get(url).status_code == 404


def test_the_planner_sets_the_stock_and_a_bad_entry_saves_nothing(client, planner, technician, fan_fitted_capacitor):
    site, part = fan_fitted_capacitor.motor.site, fan_fitted_capacitor.part
    other = make_part(code="FILM-2U0", rated_uf=2.0)
    url = reverse("site_stock", args=[site.code])
    signed_in_client(client, planner)
    refused = client.post(url, {f"qty-{part.id}": "4", f"qty-{other.id}": "two"})
    assert f"{other.code}: &#x27;two&#x27; is not a whole number" in refused.content.decode()
    # Nothing saved, and the boxes come back as typed (text boxes: a number box shows "two" as empty), the
    # refused one marked and its message tied to it (as the route page's walking order).
    page = refused.content.decode()
    assert f'name="qty-{other.id}" id="qty-{other.code}" value="two"' in page
    assert f'name="qty-{part.id}" id="qty-{part.code}" value="4"' in page
    assert f'aria-describedby="qty-{other.code}-error"' in page and f'href="#qty-{other.code}"' in page
    assert not SiteStock.objects.exists()
    saved = client.post(url, {f"qty-{part.id}": "4", f"qty-{other.id}": "0"}, follow=True)
    assert "Stock saved: 1 quantity changed." in saved.content.decode()
    assert list(SiteStock.objects.values_list("part__code", "quantity")) == [(part.code, 4)]
    # A save that changes nothing says so: "Stock saved." for a page sent back untouched read as a change made.
    unchanged = client.post(url, {f"qty-{part.id}": "4", f"was-{part.id}": "4"}, follow=True).content.decode()
    assert "Nothing to save: every quantity is as it was." in unchanged and "Stock saved" not in unchanged
    emptied = client.post(url, {f"qty-{part.id}": " ", f"was-{part.id}": "4"})  # a box cleared by a glove
    assert f"{part.code}: is empty: type 0 if none are held" in emptied.content.decode()
    assert list(SiteStock.objects.values_list("part__code", "quantity")) == [(part.code, 4)]
    signed_in_client(client, technician)
    assert client.get(url).status_code == 200
    assert client.post(url, {f"qty-{part.id}": "9"}).status_code == 403


def start_part_40_uf():
    """A 40 uF 250 V motor-start electrolytic (0/+20 %, no class marked): a two-value motor's start part."""
    return make_part(
        code="ELEC-40",
        rated_uf=40.0,
        rated_voltage_v=250,
        dielectric="electrolytic",
        tolerance_minus_pct=0,
        tolerance_plus_pct=20,
        class_of_operation="",
    )


def test_parts_that_can_stand_in_counts_the_designs_each_part_suits(client, engineer, fan_fitted_capacitor):
    """[derived] the example fan is one design; its own part and a second 4 uF film part suit it, a 2 uF part
    does not (it breaks the main-winding current limit), an electrolytic does not (duty, [trade])."""
    make_part(code="FILM-4U0-B", rated_uf=4.0)
    make_part(code="FILM-2U0", rated_uf=2.0)
    make_part(code="ELEC-4U0", rated_uf=4.0, dielectric="electrolytic")
    signed_in_client(client, engineer)
    body = client.get(reverse("stand_in_parts")).content.decode()
    compact = " ".join(body.split())
    assert f'<td class="nowrap">{fan_fitted_capacitor.part.code}</td>' in compact
    for code, suited in ((fan_fitted_capacitor.part.code, 1), ("FILM-4U0-B", 1), ("FILM-2U0", 0)):
        row = compact.split(f'<td class="nowrap">{code}</td>')[1].split("</tr>")[0]
        assert f"{suited} of 1" in row, (code, row)
    row = compact.split('<td class="nowrap">ELEC-4U0</td>')[1].split("</tr>")[0]
    assert "no start positions in service" in row, row  # the fan has a run position only


def test_a_stand_in_part_is_counted_against_the_designs_of_its_own_role_only(client, engineer, fan_fitted_capacitor):
    """Every part "suited 1 of 7 designs": the count took in the designs of the other role, which a part never
    stands in for (film for run, electrolytic for start, [trade]). The example fan (a run position) and a
    two-value motor (a run and a start position) make two run designs and one start design: a film part
    counts out of the two, an electrolytic one out of the one, each table's heading naming the role."""
    motor = make_motor(motor_type="two_value")
    make_fitted_capacitor(motor=motor, role="run", part=fan_fitted_capacitor.part)
    make_fitted_capacitor(motor=motor, role="start", part=start_part_40_uf())
    families = {family["dielectric"]: family for family in substitutes.part_families()}
    film = {part["code"]: part for part in families["film"]["parts"]}[fan_fitted_capacitor.part.code]
    electrolytic = {part["code"]: part for part in families["electrolytic"]["parts"]}["ELEC-40"]
    assert film["designs"] == 2 and film["designs_suited"] + film["designs_marginal"] <= 2
    assert electrolytic["designs"] == 1 and electrolytic["designs_suited"] == 1  # its own design
    assert families["film"]["role"] == "run" and families["electrolytic"]["role"] == "start"
    signed_in_client(client, engineer)
    compact = " ".join(client.get(reverse("stand_in_parts")).content.decode().split())
    assert '<th class="num">Run designs it suits</th>' in compact
    assert '<th class="num">Start designs it suits</th>' in compact
    row = compact.split('<td class="nowrap">ELEC-40</td>')[1].split("</tr>")[0]
    assert "1 of 1</td>" in row, row
    assert "of 3" not in compact


def test_stand_in_parts_that_suit_as_many_designs_are_listed_by_rating():
    """A walk found START-143U, START-208U, START-98U: equals were listed by code as text. [derived] among parts
    suiting as many designs, the smaller rating first, as the stock page lists parts."""
    for code, rated_uf in (("START-143U", 143.0), ("START-208U", 208.0), ("START-98U", 98.0)):
        make_part(code=code, rated_uf=rated_uf, dielectric="electrolytic")
    family = next(family for family in substitutes.part_families() if family["dielectric"] == "electrolytic")
    assert [part["code"] for part in family["parts"]] == ["START-98U", "START-143U", "START-208U"]


def test_a_stop_gap_is_not_a_design_of_its_own(fan_fitted_capacitor):
    """A fresh-eyes walk: after two stop-gaps the stand-in parts page counted a film part against "6" run designs
    where the fleet had four: each part fitted against the advice made a design of its own. [derived] a position's
    design is its motor's and its design part's; a stop-gap is fitted against that design, not as one."""
    twin = make_fitted_capacitor(motor=make_motor(), part=fan_fitted_capacitor.part, fitted_on=dt.date(2022, 1, 1))
    replace_capacitor(
        fitted_capacitor=twin,
        part=make_part(code="RUN-2-450", rated_uf=2.0),
        removed_on=dt.date(2026, 11, 2),
        reason="failed",
        substitute_override=True,
        override_reason="no 4 uF on site",
    )
    film = next(family for family in substitutes.part_families() if family["dielectric"] == "film")
    assert {part["designs"] for part in film["parts"]} == {1}, film["parts"]
    assert list(substitutes.designs_in_service().values()) == [fan_fitted_capacitor.id]


def test_a_motor_without_a_circuit_is_judged_by_ratings_alone(client, technician, engineer):
    """[trade] no model: within the original's marked tolerance (+/-5 %) and ratings; figures are null."""
    fitted_capacitor = make_fitted_capacitor(motor=make_motor(with_circuit=False))
    make_part(code="FILM-4U1", rated_uf=4.1)
    make_part(code="FILM-4U5", rated_uf=4.5)
    body = client_for(engineer).get(reverse("api_fitted_capacitor_substitutes", args=[fitted_capacitor.id])).json()
    items = {item["part_code"]: item for item in body["items"]}
    assert body["has_circuit"] is False and body["design"]["main_current_a"] is None
    assert items["FILM-4U1"]["verdict"] == "suitable" and items["FILM-4U5"]["verdict"] == "unsuitable"
    assert any("ratings alone" in reason for reason in items["FILM-4U1"]["reasons"])
    signed_in_client(client, technician)
    page = client.get(reverse("replace", args=[fitted_capacitor.id])).content.decode()
    assert "parts are judged by their ratings alone" in page


def test_the_start_capacitor_of_a_two_value_motor_is_judged_with_its_run_capacitor_in_parallel(engineer):
    """[derived] a two-value motor starts on run + start in parallel: the start candidate's starting torque
    is the model's with both, and the design's own electrolytic is suitable where a film part is not ([trade])."""
    motor = make_motor(motor_type="two_value")
    make_fitted_capacitor(motor=motor, role="run")
    start = make_fitted_capacitor(
        motor=motor,
        role="start",
        part=start_part_40_uf(),
    )
    make_part(code="FILM-40", rated_uf=40.0, rated_voltage_v=250, class_of_operation="")
    body = client_for(engineer).get(reverse("api_fitted_capacitor_substitutes", args=[start.id])).json()
    items = {item["part_code"]: item for item in body["items"]}
    assert items["ELEC-40"]["verdict"] == "suitable", items["ELEC-40"]["reasons"]
    assert items["FILM-40"]["verdict"] == "unsuitable"
    circuit = MotorCircuit.from_arrays(
        **{name: EXAMPLE_FAN_CIRCUIT[f"{name}_ohm"] for name in ("r1m", "x1m", "r1a", "x1a", "r2", "x2", "xm")},
        turns_ratio=EXAMPLE_FAN_CIRCUIT["turns_ratio"],
        voltage_v=motor.rated_voltage_v,
        frequency_hz=motor.frequency_hz,
        poles=motor.poles,
        rotational_loss_w=EXAMPLE_FAN_CIRCUIT["rotational_loss_w"],
    )
    both = two_winding_running(circuit, 4.0 + 40.0, 1.0)  # 4 uF run + 40 uF start, at standstill
    assert items["ELEC-40"]["starting_torque_nm"] == pytest.approx(float(both.torque_nm), rel=1e-3)


def designs_from_scratch(user=None) -> dict[tuple, int]:
    """[derived] The designs as the page found them before the ledger: every capacitor in service on a
    motor in service joined with its motor, grouped by part, role and design, the first capacitor of each;
    a stop-gap (fitted against the advice) is not its position's design."""
    fitted = scope_to_user(
        FittedCapacitor.objects.filter(removed_on__isnull=True, motor__status="in_service", substitute_override=False),
        user,
    )
    key = ["part_id", "role", *(f"motor__{name}" for name in substitutes.DESIGN_FIELDS)]
    rows = fitted.values(*key).annotate(first_id=Min("id")).order_by().values_list(*key, "first_id")
    return {tuple(row[:-1]): row[-1] for row in rows}


def assert_the_page_reads_the_designs_it_would_join(monkeypatch, users, judged=False):
    """The designs for every user; with `judged`, also the positions judged together against one at a
    time, and the page's whole table against the table of the joined designs (judging is the slow part,
    and both follow from the designs being equal, so they are checked on one state of the fleet)."""
    for user in users:
        scratch = designs_from_scratch(user)
        assert substitutes.designs_in_service(user) == scratch
        if not judged:
            continue
        if user is users[0]:
            # The positions judged together are those judged one at a time.
            firsts = list(FittedCapacitor.objects.in_bulk(scratch.values()).values())
            singles = substitutes.candidates_of(substitutes.parts_frame())
            together = [advise(p, singles) for p in substitutes.positions_of(firsts)]
            alone = [advise(substitutes.position_of(f), singles) for f in firsts]
            assert [(a.verdict.tolist(), a.reasons) for a in together] == [
                (a.verdict.tolist(), a.reasons) for a in alone
            ]
        kept = substitutes.part_families(user)
        with monkeypatch.context() as patched:
            patched.setattr(substitutes, "designs_in_service", lambda user=None: designs_from_scratch(user))
            assert kept == substitutes.part_families(user)


def test_the_stand_in_designs_kept_on_write_are_those_a_join_of_the_fleet_finds(monkeypatch, engineer):
    """[derived] The designs read from the ledger kept by the database (migration 0032) equal those of a join
    of every capacitor in service with its motor, and the page's table with them, for every site and for a
    user of one site: on a varied fleet, and after motors are added, moved, re-rated, retired, their
    capacitors replaced, removed or deleted, in statements of one row and of many, and after compaction."""
    north, south = make_site("DN"), make_site("DS")
    user = make_user(RELIABILITY_ENGINEER)
    SiteMembership.objects.create(user=user, site=south)
    run_4, run_5 = make_part(code="RUN-4", rated_uf=4.0), make_part(code="RUN-5", rated_uf=5.0)
    start = make_part(code="START-40", rated_uf=40.0, rated_voltage_v=250, dielectric="electrolytic")
    motors = []
    for n in range(12):
        kind = "two_value" if n % 3 == 0 else "permanent_split"
        motor = make_motor(site=(north, south)[n % 2], with_circuit=n % 4 != 1, motor_type=kind)
        motor.full_load_current_a += 0.1 * (n % 2)
        motor.save()
        make_fitted_capacitor(motor=motor, part=(run_4, run_5)[n % 5 == 0])
        if kind == "two_value":
            make_fitted_capacitor(motor=motor, role="start", part=start)
        if n % 4 == 2:  # a capacitor in its history, removed
            make_fitted_capacitor(
                motor=motor,
                part=run_5,
                fitted_on=dt.date(2019, 1, 1),
                removed_on=dt.date(2021, 12, 31),
                removal_reason="failed",
                role="start",
            )
        motors.append(motor)
    Motor.objects.filter(pk=motors[5].pk).update(status="standby")
    users = (None, user, engineer)
    assert len(designs_from_scratch()) >= 6
    assert_the_page_reads_the_designs_it_would_join(monkeypatch, users)

    added = make_motor(site=south, motor_type="two_value", rated_speed_rpm=930)
    make_fitted_capacitor(motor=added, part=run_5)
    moved = motors[0]
    moved.site = south
    moved.save()
    Motor.objects.filter(pk__in=[m.pk for m in motors[1:4]]).update(rated_speed_rpm=920, r1m_ohm=None)
    Motor.objects.filter(pk=motors[5].pk).update(status="in_service")
    Motor.objects.filter(pk=motors[6].pk).update(status="retired")
    replaced = FittedCapacitor.objects.get(motor=motors[7], removed_on__isnull=True)
    replace_capacitor(
        fitted_capacitor=replaced,
        part=run_5,
        removed_on=timezone.localdate(),
        reason="failed",
        substitute_override=True,
        override_reason="the only part on the shelf",
    )
    # A stop-gap marked afterwards in a statement of many rows, and one marked stop-gap deleted.
    FittedCapacitor.objects.filter(motor__in=motors[2:4], removed_on__isnull=True, role="run").update(
        substitute_override=True, override_reason="marked later"
    )
    FittedCapacitor.objects.filter(motor=motors[3], role="run", removed_on__isnull=True).delete()
    FittedCapacitor.objects.filter(motor=motors[9], role="start").delete()
    FittedCapacitor.objects.filter(motor__in=motors[10:], removed_on__isnull=True).update(part=run_4)
    assert_the_page_reads_the_designs_it_would_join(monkeypatch, users)

    compact_counts()
    assert_the_page_reads_the_designs_it_would_join(monkeypatch, users, judged=True)


def test_a_stop_gap_the_motor_model_says_overloads_the_motor_is_replace_now_and_says_why():
    """A fresh-eyes walk: a part fitted against the advice, far below the position's rating, drove the motor model's
    main-winding current past its limit at the part's own rating; the limit was set aside as a design finding and
    the capacitor judged "sound", replace by four years on. The same part fitted against the advice is now
    "replace now", its reason naming the part's rating and the limit; fitted as the design it stays a finding for
    the engineer. [trade] a permanent-split capacitor motor runs on the capacitance it was designed for; a much
    smaller one raises the main-winding current and lowers the starting torque (common practice of the trade, no
    single source)."""
    from fleet.models import Assessment
    from fleet.services.assessments import refit_fitted_capacitors

    small = make_part(code="RUN-2-450", rated_uf=2.0)  # the example fan's run capacitor is 4 uF
    start = timezone.make_aware(dt.datetime(2025, 1, 8, 9))
    stop_gap = make_fitted_capacitor(part=small, substitute_override=True, override_reason="no 4 uF on site")
    designed = make_fitted_capacitor(part=small)
    for capacitor in (stop_gap, designed):
        quarterly_readings(capacitor, start, [2.0, 1.998, 1.996, 1.994])
    refit_fitted_capacitors([stop_gap.id, designed.id])
    judged = {a.fitted_capacitor_id: a for a in Assessment.objects.filter(is_current=True)}
    assert judged[stop_gap.id].risk == "replace now"
    assert judged[stop_gap.id].reason.startswith("at its rated 2.00 µF this part already breaches the ")
    assert "fitted against the advice" in judged[stop_gap.id].reason
    assert judged[designed.id].risk != "replace now"
    assert judged[designed.id].limit_source == "tolerance"


def test_a_stop_gap_far_over_the_design_value_overloads_the_motor_and_is_replace_now():
    """A fresh-eyes walk: a 20 uF run capacitor fitted against the advice in an 8 uF position was "sound", replace by
    in four years, while its own capacitor page showed the motor drawing 3.13 A against a 1.9 A full-load rating
    and 259 W of copper loss. No limit of a falling capacitance sees a part too large; a part fitted against the
    advice that makes the motor model draw more than the full-load current with the service factor is now "replace
    now", saying so; the same part fitted as the design stays judged on its wear (a design finding is the
    engineer's). [trade] a run capacitor well over the design value overloads the auxiliary winding; running
    current over full-load current times the service factor is an overload (common practice of the trade, no single
    source)."""
    from fleet.models import Assessment
    from fleet.services.assessments import refit_fitted_capacitors
    from fleet.services.operating_pictures import with_operating_figures

    design = make_part(code="RUN-4-450", rated_uf=4.0)  # the example fan's design
    large = make_part(code="RUN-12-450", rated_uf=12.0)
    worn = make_fitted_capacitor(part=design, fitted_on=dt.date(2022, 1, 1))
    stop_gap = replace_capacitor(
        fitted_capacitor=worn,
        part=large,
        removed_on=dt.date(2025, 1, 2),
        reason="failed",
        substitute_override=True,
        override_reason="no 4 uF on site",
    )
    designed = make_fitted_capacitor(part=large)
    start = timezone.make_aware(dt.datetime(2025, 1, 8, 9))
    for capacitor in (stop_gap, designed):
        quarterly_readings(capacitor, start, [12.0, 11.99, 11.98, 11.97])
    refit_fitted_capacitors([stop_gap.id, designed.id])
    judged = {a.fitted_capacitor_id: a for a in with_operating_figures(Assessment.objects.filter(is_current=True))}
    over = judged[stop_gap.id]
    full_load_a = stop_gap.motor.full_load_current_a
    assert over.figures_now["i_line_a"] > 1.15 * full_load_a  # the page's own figure says the overload
    assert over.risk == "replace now", over.reason
    assert over.reason.startswith("fitted against the advice, it overloads the motor: the motor model draws ")
    assert f"{1.15 * full_load_a:.2f} A (the nameplate's full-load current with the service factor)" in over.reason
    assert 7 <= (over.replace_by - over.created_at.date()).days <= 14  # as a reading below its limit: within days
    assert judged[designed.id].risk != "replace now"


def test_a_stop_gap_fitted_leaves_the_motor_model_of_its_design_as_it_was():
    """A fresh-eyes walk: after a 4 uF stop-gap went into a 30 uF position, the design part's own figures moved
    (7.05 A and 2850 rpm before, 6.70 A and 2892 rpm after) and the stop-gap showed the nameplate's 2850 rpm: the
    load was matched to the rated slip at the stop-gap's rating. The load is the one the motor as designed drives
    at its rated slip ([derived] the load's torque is the driven machine's, whatever capacitor is fitted), so the
    design's figures stay, and the stop-gap's show the motor it really makes: slower and hotter on a small one."""
    from fleet.services.readings import replace_capacitor

    design = make_part(code="RUN-4-450", rated_uf=4.0)  # the example fan's design
    worn = make_fitted_capacitor(part=design, fitted_on=dt.date(2022, 1, 1))
    before = substitutes.substitutes_for(worn, pairs=False)["design"]
    stop_gap = replace_capacitor(
        fitted_capacitor=worn,
        part=make_part(code="RUN-2-450", rated_uf=2.0),
        removed_on=dt.date(2026, 11, 2),
        reason="failed",
        substitute_override=True,
        override_reason="no 4 uF on site",
    )
    after = substitutes.substitutes_for(stop_gap, pairs=False)
    assert after["design"] == before
    fitted = next(item for item in after["items"] if item["part_code"] == "RUN-2-450")
    assert fitted["speed_rpm"] < before["speed_rpm"], (fitted, before)


def test_the_design_rating_the_refit_reads_is_the_design_part_the_pages_name():
    """Two ways to one rule (the newest capacitor at the position fitted without an override, on or before the
    stop-gap): the refit's frame (`selectors.design_rated_uf`, by merge) and the pages' `design_parts` (by
    instance) agree on a stop-gap after a stop-gap, two fittings on one day, and a position with no design known."""
    from fleet.services.selectors import fitted_capacitors_frame

    motor, lone = make_motor(), make_motor()
    six, eight, ten, twelve = (make_part(code=f"RUN-{uf}-450", rated_uf=uf) for uf in (6.0, 8.0, 10.0, 12.0))
    day = dt.date(2024, 5, 6)
    first = make_fitted_capacitor(motor=motor, part=eight, fitted_on=dt.date(2022, 1, 1))
    first.removed_on, first.removal_reason = day, "failed"
    first.save()
    same_day = make_fitted_capacitor(motor=motor, part=ten, fitted_on=day)  # fitted and out on one day
    same_day.removed_on, same_day.removal_reason = day, "other"
    same_day.save()
    gap = make_fitted_capacitor(motor=motor, part=six, fitted_on=day, substitute_override=True, override_reason="x")
    gap.removed_on, gap.removal_reason = dt.date(2025, 1, 6), "failed"
    gap.save()
    second_gap = make_fitted_capacitor(
        motor=motor, part=twelve, fitted_on=dt.date(2025, 1, 6), substitute_override=True, override_reason="y"
    )
    alone = make_fitted_capacitor(motor=lone, part=six, substitute_override=True, override_reason="z")
    capacitors = [first, same_day, gap, second_gap, alone]
    frame = fitted_capacitors_frame([c.id for c in capacitors]).set_index("fitted_capacitor_id")
    names = substitutes.design_parts(capacitors)
    assert [frame.loc[c.id, "design_rated_uf"] for c in capacitors] == [names[c.id].rated_uf for c in capacitors]
    assert [names[c.id].code for c in capacitors] == ["RUN-8.0-450", "RUN-10.0-450", "RUN-10.0-450"] + [
        "RUN-10.0-450",
        "RUN-6.0-450",
    ]


def test_the_replacement_forms_error_summary_lists_the_fields_in_the_pages_order(client, technician):
    """A re-walk: the summary of a refused replacement listed "Replaced on" before "Why the old one came out",
    the opposite of the page. It lists each refused field in the order the page shows them."""
    fitted_capacitor = make_fitted_capacitor()
    signed_in_client(client, technician)
    body = post_replacement(client, fitted_capacitor, fitted_capacitor.part, removal_reason="", removed_on="")
    page = body.content.decode()
    summary = page[page.index('id="error-summary"') :].split("</ul>")[0]
    assert summary.index("#wrap_removal_reason") < summary.index("#wrap_removed_on"), summary
    assert page.index('id="wrap_removal_reason"') < page.index('id="wrap_removed_on"')


def test_a_cached_advice_is_the_advice_of_its_own_position(fan_fitted_capacitor):
    """The stand-in parts page judged every design's motor model on every load (650 ms at 100,000 motors); the
    advice is cached under a digest of its position and candidates. [derived] A cached advice equals the advice
    worked out afresh, and a position that differs in any input (here its design rating, then its circuit) is its
    own entry, never another's."""
    import dataclasses

    from django.core.cache import cache

    cache.clear()
    make_part(code="FILM-4U5", rated_uf=4.5)
    position = substitutes.position_of(fan_fitted_capacitor)
    singles = substitutes.candidates_of(substitutes.parts_frame())
    first = substitutes.cached_advice(position, singles)
    again = substitutes.cached_advice(position, singles)
    fresh = advise(position, singles)
    assert again.verdict.tolist() == first.verdict.tolist() == fresh.verdict.tolist()
    assert again.reasons == fresh.reasons
    for changed in (
        dataclasses.replace(position, design_uf=8.0),
        dataclasses.replace(position, circuit=dataclasses.replace(position.circuit, xm=position.circuit.xm * 0.5)),
    ):
        cached, afresh = substitutes.cached_advice(changed, singles), advise(changed, singles)
        assert (cached.verdict.tolist(), cached.reasons) == (afresh.verdict.tolist(), afresh.reasons)
        assert (cached.verdict.tolist(), cached.reasons) != (fresh.verdict.tolist(), fresh.reasons)


def test_the_capacitor_voltage_keeps_the_precision_of_the_other_figures():
    """[derived] The replacement screen rounds the capacitor voltage to whole volts, as the capacitor page
    rounds the motor model's own figure: rounded first to a tenth, 421.459 V showed as 422 V there against
    421 V on the capacitor page. Kept to three decimals like the currents, both pages show 421 V."""
    names = {field: 1.0 for field in substitutes.FIGURES.values()}
    figures = SimpleNamespace(**names, v_capacitor_v=421.459, start_capacitor_voltage_v=215.46)
    run = substitutes._figures(figures, 0, SimpleNamespace(role="run"))
    start = substitutes._figures(figures, 0, SimpleNamespace(role="start"))
    assert run["capacitor_voltage_v"] == pytest.approx(421.459, abs=5e-4)
    assert start["capacitor_voltage_v"] == pytest.approx(215.46, abs=5e-4)
    assert floatformat(run["capacitor_voltage_v"], 0) == floatformat(421.459, 0) == "421"
