"""The second collection's question families: name -> module with NAME, DESCRIPTION, solve(...) and
generate(rng), made the same way as the demo families in samples/families/."""

from __future__ import annotations

from types import ModuleType

from . import (
    berth_dues,
    card_digit,
    cheque_words,
    fuel_litres,
    ice_reorder,
    landing_tally,
    licence_expiry,
    mooring_route,
    overdue_account,
    passage_arrival,
    pilot_isbn,
    regatta_ranking,
    sail_area,
    sounding_depth,
    supplier_iban,
    tank_litres,
)

EXTRA_FAMILIES: dict[str, ModuleType] = {
    m.NAME: m
    for m in (
        fuel_litres,
        sounding_depth,
        berth_dues,
        card_digit,
        pilot_isbn,
        passage_arrival,
        licence_expiry,
        landing_tally,
        mooring_route,
        overdue_account,
        ice_reorder,
        regatta_ranking,
        tank_litres,
        cheque_words,
        supplier_iban,
        sail_area,
    )
}
