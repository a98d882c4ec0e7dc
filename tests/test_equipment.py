"""Equipment profiles: MODCOD tables, the error-vector floor, back-off as a choice, the
symbol-rate grid (solver/equipment.py and its use by the candidates and the planner)."""

from __future__ import annotations

import math
from dataclasses import replace
from fractions import Fraction
from typing import get_args

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.schemas import ModcodSetName
from solver import (
    MODCOD_SET_NAMES,
    Amplifier,
    Block,
    Coding,
    Demand,
    EquipmentProfile,
    ModcodRow,
    Modulation,
    Problem,
    Transmitter,
    equipment,
    solve,
    verify_plan,
)
from solver.candidates import build_candidates, family_for
from solver.physics import distortion, emission, inband

RAPP = Amplifier(smoothness=2.0, output_backoff_db=6.0)


def _radio(**changes: object) -> EquipmentProfile:
    base = EquipmentProfile(
        "radio",
        modcod_set="nr-256qam",
        rolloffs=(0.2, 0.35),
        amplifier=RAPP,
        output_backoffs_db=(2.0, 4.0, 6.0, 8.0),
        reference_backoff_db=6.0,
    )
    return EquipmentProfile(**{**base.__dict__, **changes})  # type: ignore[arg-type]


def _problem(profile: EquipmentProfile, *demands: Demand) -> Problem:
    return Problem(
        block=Block(2_000e6, 2_020e6, 5e3),
        demands=demands,
        profiles=(profile,),
        transmitter=Transmitter(rolloffs=(0.2, 0.35)),
        time_limit_s=4.0,
        num_workers=1,
    )


def test_the_wire_names_every_set_the_solver_has() -> None:
    assert set(get_args(ModcodSetName)) == set(MODCOD_SET_NAMES)


def test_a_user_supplied_threshold_is_used_exactly() -> None:
    # A data sheet's figure (invented for this test) must reach the plan unchanged: no
    # implementation loss, no recomputation.
    own = EquipmentProfile(
        "telemetry",
        modcods=(
            ModcodRow(Modulation.QPSK, Fraction(1, 2), required_esn0_db=3.37),
            ModcodRow(Modulation.QAM16, Fraction(3, 4), required_esn0_db=11.91),
        ),
        rolloffs=(0.35,),
        implementation_loss_db=2.0,
    )
    demand = Demand("t", 50e3, 400e3, esn0_db=20.0, profile="telemetry")
    families = build_candidates(_problem(own, demand), demand).candidates
    thresholds = {f.config.required_esn0_db for f in families}
    assert thresholds <= {3.37, 11.91}
    assert 11.91 in thresholds


def test_every_plan_rate_lies_on_the_equipment_grid() -> None:
    radio = _radio(
        symbol_rate_step_baud=1_000.0,
        output_backoffs_db=(),
        amplifier=None,
        reference_backoff_db=None,
    )
    demands = tuple(
        Demand(f"m{k}", 2e6 + k * 0.7e6, 12e6, cn0_dbhz=84.0 + k, profile="radio") for k in range(4)
    )
    problem = _problem(radio, *demands)
    plan = solve(problem)
    assert plan.carriers
    assert verify_plan(problem, plan.carriers).passed
    for c in plan.carriers:
        steps = c.config.symbol_rate_baud / 1_000.0
        assert steps == pytest.approx(round(steps), abs=1e-6), c.config.symbol_rate_baud
        # throughput follows from the rounded rate
        net = c.config.throughput_bps / c.config.symbol_rate_baud
        entry = next(
            e
            for e in equipment.modcod_table(radio, problem.coding)
            if (e.modulation, e.code_rate) == (c.config.modulation, c.config.code_rate)
        )
        assert net == pytest.approx(entry.net_bits_per_symbol, rel=1e-12)


@settings(max_examples=10, deadline=None)
@given(
    p=st.floats(1.0, 10.0),
    low=st.floats(1.0, 12.0),
    extra=st.floats(0.5, 10.0),
    cn0=st.floats(60.0, 90.0),
)
def test_more_backoff_lowers_thermal_es_n0_dB_for_dB_and_never_worsens_evm(
    p: float, low: float, extra: float, cn0: float
) -> None:
    radio = _radio(
        amplifier=Amplifier(smoothness=p, output_backoff_db=low),
        output_backoffs_db=(low, low + extra),
        reference_backoff_db=low,
    )
    a, b = equipment.backoff_options(radio)
    assert b.esn0_offset_db == pytest.approx(a.esn0_offset_db - extra)  # dB for dB
    for modulation in (Modulation.QPSK, Modulation.QAM64):
        louder, quieter = (
            equipment.carrier_evm_pct(radio, x, modulation, 0.2) for x in (low, low + extra)
        )
        assert quieter <= louder + 1e-9
    demand = Demand("c", 1e6, 4e6, cn0_dbhz=cn0, margin_db=0.0, profile="radio")
    problem = _problem(radio, demand)
    configs = [
        family_for(
            problem, demand, Modulation.QPSK, Fraction(120, 1024), 0.2, 1e6, output_backoff_db=x
        )
        for x in (low, low + extra)
    ]
    if all(c is not None for c in configs):
        first, second = (c.config for c in configs if c is not None)
        assert second.thermal_esn0_db is not None and first.thermal_esn0_db is not None
        assert second.thermal_esn0_db == pytest.approx(first.thermal_esn0_db - extra)
        # the effective figure may rise or fall: that trade is what the optimiser weighs


def test_more_backoff_lowers_the_amplifier_leakage() -> None:
    keys = [
        emission.EmissionKey.for_carrier(
            equipment.transmitter_at(_radio(), b), Modulation.QAM16, 0.2
        )
        for b in (2.0, 8.0)
    ]
    loud, quiet = (emission.get_profile(k).guard_needed(40.0) for k in keys)
    assert quiet < loud


def test_a_request_without_profiles_keeps_its_transmitter_and_link_model() -> None:
    # Apart from the default MODCOD set, nothing changes: no EVM floor, one back-off.
    problem = Problem(
        block=Block(0.0, 10e6, 1e3),
        demands=(Demand("d", 1e6, 2e6, esn0_db=15.0),),
        transmitter=Transmitter(rolloffs=(0.25,), amplifier=RAPP),
    )
    profile = equipment.profile_for(problem, problem.demands[0])
    assert profile.rolloffs == (0.25,) and profile.amplifier == RAPP
    (only,) = equipment.backoff_options(profile)
    assert only.esn0_offset_db == 0.0
    assert equipment.carrier_evm_pct(profile, None, Modulation.QAM16, 0.25) == 0.0
    assert only.output_backoff_db == RAPP.output_backoff_db
    assert profile.modcod_set == equipment.DEFAULT_SET == "standard"


def test_the_effective_es_n0_caps_what_a_noisy_transmitter_can_run() -> None:
    # 3GPP TS 38.104 Table 6.5.2.2-1 (from memory): a 256QAM transmitter must keep EVM under
    # 3.5 %.  A radio with an 8 % floor cannot close the entries of TS 38.214 Table
    # 5.1.3.1-2 whose thresholds lie above −20·log10(0.08) = 21.9 dB, however strong its link.
    noisy = _radio(amplifier=None, output_backoffs_db=(), reference_backoff_db=None, tx_evm_pct=8.0)
    demand = Demand("n", 1e6, 40e6, esn0_db=60.0, margin_db=0.0, profile="radio")
    families = build_candidates(_problem(noisy, demand), demand).candidates
    assert families
    cap = -20.0 * math.log10(0.08)
    for f in families:
        assert f.config.esn0_db <= cap
        assert f.config.required_esn0_db <= cap
        assert f.config.evm_pct == pytest.approx(8.0)
    densest = (Modulation.QAM256, Fraction(948, 1024))  # MCS 27, above the cap
    assert all((f.config.modulation, f.config.code_rate) != densest for f in families)


def test_a_carrier_reports_its_backoff_and_floor() -> None:
    demand = Demand("r", 0.5e6, 8e6, cn0_dbhz=80.0, profile="radio")
    problem = _problem(_radio(), demand)
    fam = family_for(
        problem, demand, Modulation.QPSK, Fraction(308, 1024), 0.2, 1e6, output_backoff_db=8.0
    )
    assert fam is not None
    cfg = fam.config
    assert cfg.output_backoff_db == 8.0
    assert cfg.thermal_esn0_db == pytest.approx(80.0 - 60.0 - 2.0)  # 2 dB past the reference
    at_8db = Amplifier(smoothness=2.0, output_backoff_db=8.0)
    span = _radio().filter_span_symbols
    key = emission.EmissionKey(0.2, span, amplifier=at_8db, modulation=Modulation.QPSK)
    assert cfg.evm_pct == pytest.approx(inband.decision_distortion(key).evm_pct)
    # A QPSK carrier peaks far less than a Gaussian signal, and its matched filter drops the
    # out-of-band part: its floor lies below the Gaussian-input Bussgang figure.
    assert cfg.evm_pct < distortion.bussgang(at_8db).evm_pct
    assert cfg.esn0_db < cfg.thermal_esn0_db


@pytest.mark.parametrize("step_baud", [0.0, 1_000.0])
def test_no_plan_rate_exceeds_the_equipment_maximum(step_baud: float) -> None:
    # Strong links and targets far above what 1 Mbaud carries: every carrier wants more rate
    # than the radio has, and the block leaves room to widen, so the packer's finer widths
    # reach the top of each family.
    radio = _radio(
        symbol_rate_step_baud=step_baud,
        symbol_rate_max_baud=1e6,
        output_backoffs_db=(),
        amplifier=None,
        reference_backoff_db=None,
    )
    demands = tuple(Demand(f"w{k}", 1e6, 40e6, esn0_db=25.0 + k, profile="radio") for k in range(3))
    plan = solve(_problem(radio, *demands))
    assert len(plan.carriers) == 3
    for c in plan.carriers:
        assert c.config.symbol_rate_baud <= 1e6 * (1 + 1e-12), c.config.symbol_rate_baud


def test_the_quieter_request_drops_only_the_louder_backoffs() -> None:
    demand = Demand("q", 1e6, 4e6, esn0_db=12.0, profile="radio")
    assert equipment.quieter(_problem(_radio(output_backoffs_db=(6.0, 8.0)), demand)) is None
    (cut,) = equipment.quieter(_problem(_radio(), demand)).profiles  # type: ignore[union-attr]
    assert cut.output_backoffs_db == (6.0, 8.0)  # the reference (6 dB) and quieter
    loud = _radio(output_backoffs_db=(2.0, 4.0), reference_backoff_db=6.0)
    (only,) = equipment.quieter(_problem(loud, demand)).profiles  # type: ignore[union-attr]
    assert only.output_backoffs_db == (4.0,)  # none at the reference or quieter: the quietest
    no_profiles = replace(_problem(_radio(), demand), profiles=())
    assert equipment.quieter(replace(no_profiles, demands=(replace(demand, profile=""),))) is None


def test_a_louder_backoff_is_still_chosen_where_only_it_closes_the_link() -> None:
    # The radio's lowest entry, TS 38.214 Table 5.1.3.1-2 MCS 0 (QPSK 120/1024), needs the
    # threshold the physics core computes for it plus the 3 dB margin.  The link is stated 1 dB
    # short of that at the 6 dB reference, so only the 4 dB back-off (+2 dB) or louder closes
    # it: the plan must come from the full request, not from its quieter part.
    lowest = equipment.modcod_table(_radio(), Coding())[0]
    assert (lowest.modulation, lowest.code_rate) == (Modulation.QPSK, Fraction(120, 1024))
    stated = lowest.required_esn0_db + 3.0 - 1.0
    demand = Demand("weak", 0.1e6, 1e6, esn0_db=stated, margin_db=3.0, profile="radio")
    problem = _problem(_radio(), demand)
    plan = solve(problem)
    quiet_plan = solve(equipment.quieter(problem))  # type: ignore[arg-type]
    assert not quiet_plan.carriers
    (carrier,) = plan.carriers
    assert carrier.config.output_backoff_db is not None
    assert carrier.config.output_backoff_db < 6.0
