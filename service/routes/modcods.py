"""``GET /v1/modcods``: the modulation and coding catalogue with required Es/N0."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query

from service.convert import finite_or_none
from service.routes.plans import PROBLEM_RESPONSES
from service.schemas import ModcodOut, ModcodSetName
from solver import (
    Coding,
    EquipmentProfile,
    Modulation,
    catalogue,
    format_code_rate,
    modcod_table,
)

__all__ = ["router"]

router = APIRouter(prefix="/v1/modcods", tags=["modcods"])
DEFAULTS = Coding()


@router.get(
    "",
    operation_id="list_modcods",
    summary="Catalogue entries with their required Es/N0 for the given coding parameters",
    responses=PROBLEM_RESPONSES,
)
def list_modcods(
    block_length_bits: Annotated[
        int, Query(ge=64, le=1_000_000, description="code word length n (bits)")
    ] = DEFAULTS.block_length_bits,
    target_block_error_rate: Annotated[
        float, Query(gt=0, lt=0.5, description="code-word error probability")
    ] = DEFAULTS.target_block_error_rate,
    implementation_loss_db: Annotated[
        float, Query(ge=0, le=20, description="added to every threshold (dB)")
    ] = DEFAULTS.implementation_loss_db,
    target_bit_error_rate: Annotated[
        float, Query(gt=0, lt=0.5, description="bit error rate for uncoded entries")
    ] = DEFAULTS.target_bit_error_rate,
    modulation: Annotated[
        list[Modulation] | None, Query(description="restrict to these modulations")
    ] = None,
    modcod_set: Annotated[
        ModcodSetName | None,
        Query(description="a named set's entries, in its order (null: the whole catalogue)"),
    ] = None,
) -> list[ModcodOut]:
    """Every (modulation, code rate) pair, with spectral efficiency before framing; or a named
    set's entries with their labels."""
    coding = Coding(
        block_length_bits=block_length_bits,
        target_block_error_rate=target_block_error_rate,
        implementation_loss_db=implementation_loss_db,
        framing_overhead=DEFAULTS.framing_overhead,
        target_bit_error_rate=target_bit_error_rate,
    )
    if modcod_set is not None:
        return _named_set(modcod_set, coding, tuple(modulation or ()))
    entries = catalogue(coding, tuple(modulation) if modulation else None)
    return [
        ModcodOut(
            modulation=e.modulation,
            code_rate=format_code_rate(e.code_rate),
            bits_per_symbol=e.bits_per_symbol,
            spectral_efficiency_bps_per_hz=e.spectral_efficiency_bps_per_hz,
            required_esn0_db=finite_or_none(e.required_esn0_db),
        )
        for e in entries
    ]


def _named_set(name: str, coding: Coding, modulations: tuple[Modulation, ...]) -> list[ModcodOut]:
    """The entries of a named set whose threshold is finite, with the set's labels."""
    profile = EquipmentProfile(
        "query", modcod_set=name, implementation_loss_db=coding.implementation_loss_db
    )
    return [
        ModcodOut(
            modulation=e.modulation,
            code_rate=format_code_rate(e.code_rate),
            bits_per_symbol=e.bits_per_symbol,
            spectral_efficiency_bps_per_hz=e.bits_per_symbol
            * (1.0 if e.code_rate is None else float(e.code_rate)),
            required_esn0_db=e.required_esn0_db,
            label=e.label,
        )
        for e in modcod_table(profile, coding, modulations)
    ]
