"""The demo question families: name -> module with NAME, DESCRIPTION, solve(...) and generate(rng)."""

from __future__ import annotations

from types import ModuleType

from . import (
    berth_order,
    container_codes,
    container_valid,
    crate_handoffs,
    crew_overlap,
    departures,
    manifest_order,
    working_days,
)

FAMILIES: dict[str, ModuleType] = {
    m.NAME: m
    for m in (
        departures,
        container_codes,
        container_valid,
        berth_order,
        crate_handoffs,
        crew_overlap,
        working_days,
        manifest_order,
    )
}
