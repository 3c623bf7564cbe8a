"""Reference solvers of the second collection (samples/extra/) checked against outside sources, its sample files
for shape (test_references compares every committed file with its generator), and the tuning/check split."""

from __future__ import annotations

import datetime as dt
import math
import random
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # so `samples` imports without an install or PYTHONPATH
    sys.path.insert(0, str(ROOT))

from samples import make_samples  # noqa: E402
from samples.extra import families as extra  # noqa: E402  (extra.NAME: that family's module)
from samples.extra.families import EXTRA_FAMILIES  # noqa: E402
from samples.families import FAMILIES  # noqa: E402
from test_references import SAMPLES, _read_jsonl, generated  # noqa: E402  (the same helpers for both collections)



# --- conversions -----------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def ureg():
    import pint

    return pint.UnitRegistry()


def test_fuel_litres_match_pint(ureg):
    # Source: pint's unit definitions (imperial_gallon = 4.54609 litres), then rounding up to a whole litre
    # as the co-op pump bills (the rounding rule is ours, stated in the family description).
    for task in generated(extra.fuel_litres):
        litres = ureg.Quantity(task["params"]["gallons"], "imperial_gallon").to("liter").magnitude
        assert task["answer"] == math.ceil(litres)
    for tenths in range(1, 3000, 7):  # arbitrary amounts to a tenth of a gallon
        gallons = tenths / 10
        litres = ureg.Quantity(gallons, "imperial_gallon").to("liter").magnitude
        assert extra.fuel_litres.solve(gallons) == math.ceil(round(litres, 9))


def test_sounding_depth_matches_pint(ureg):
    # Source: pint's unit definitions (fathom = 6 feet, foot = 0.3048 metre). Rounding to 0.1 m never meets a
    # tie here: 0.3048 m times a whole number of feet never ends in exactly 5 hundredths.
    for fathoms in range(0, 40):
        for feet in range(0, 6):
            depth = ureg.Quantity(fathoms, "fathom") + ureg.Quantity(feet, "foot")
            assert extra.sounding_depth.solve(fathoms, feet) == f"{depth.to('meter').magnitude:.1f}"
    for task in generated(extra.sounding_depth):
        p = task["params"]
        depth = ureg.Quantity(p["fathoms"], "fathom") + ureg.Quantity(p["feet"], "foot")
        assert task["answer"] == f"{depth.to('meter').magnitude:.1f}"


def test_tank_litres_match_sympy_and_pint(ureg):
    # Source: sympy's exact pi for the cylinder (floor of pi*r^2*h/1000 computed exactly) and pint's
    # cubic centimetre -> litre conversion for the box; rounding down is the family's stated rule.
    import sympy

    for task in generated(extra.tank_litres):
        p = task["params"]
        if p["shape"] == "cylinder":
            d, h = p["dims"]
            assert task["answer"] == int(sympy.floor(sympy.pi * sympy.Rational(d, 2) ** 2 * h / 1000))
        else:
            volume = ureg.Quantity(math.prod(p["dims"]), "centimeter ** 3").to("liter").magnitude
            assert task["answer"] == math.floor(round(volume, 9))
    with pytest.raises(ValueError):
        extra.tank_litres.solve("sphere", [10])


def test_sail_area_matches_sympy_triangle():
    # Source: sympy.geometry.Triangle(sss=...) builds the triangle from its three sides and gives its exact
    # area; rounded half up to the hundredth (floor(100x + 1/2) / 100), the family's stated rule.
    import sympy
    from sympy.geometry import Triangle

    for task in generated(extra.sail_area, count=100):
        sides = [sympy.Rational(str(task["params"][k])) for k in ("luff", "leech", "foot")]
        area = abs(Triangle(sss=sides).area)
        hundredths = int(sympy.floor(area * 100 + sympy.Rational(1, 2)))
        assert task["answer"] == f"{hundredths // 100}.{hundredths % 100:02d}"
    assert extra.sail_area.solve(3, 4, 5) == "6.00"  # a right triangle, by hand: 3 x 4 / 2
    with pytest.raises(ValueError):
        extra.sail_area.solve(1, 2, 3)  # flat: no triangle


# --- tariffs, fees and interest ----------------------------------------------------------------------------

def test_berth_dues_match_numpy_interp_and_a_hand_worked_example():
    # Source: numpy.interp over the tariff's knots. A banded tariff is a piecewise-linear function of the
    # length, so interpolating the cumulative charge at each band edge gives every length's nightly dues.
    import numpy as np

    edges = [0, 8, 12, 100]
    cumulative = [0, 8 * 240, 8 * 240 + 4 * 310, 8 * 240 + 4 * 310 + 88 * 390]
    rng = random.Random(4)
    cases = [task["params"] for task in generated(extra.berth_dues)]
    cases += [{"length_m": round(rng.uniform(0.5, 40), 1), "nights": rng.randint(1, 30)} for _ in range(300)]
    for p in cases:
        metres = math.ceil(round(p["length_m"], 6))
        pence = round(float(np.interp(metres, edges, cumulative))) * p["nights"]
        assert extra.berth_dues.solve(**p) == f"{pence / 100:.2f}"
    # Worked by hand: a 12.9 m boat is charged as 13 m: 8 x 2.40 + 4 x 3.10 + 1 x 3.90 = 35.50 a night.
    assert extra.berth_dues.solve(12.9, 5) == "177.50"
    assert extra.berth_dues.solve(8, 1) == "19.20"  # exactly 8 m stays in the first band


def test_overdue_account_matches_sympy_exact_arithmetic():
    # Source: sympy.Rational exact arithmetic for balance * (1 + r/100)**months, rounded half up to the penny
    # (floor(100x + 1/2) / 100); half-up is the family's stated rule.
    import sympy

    rng = random.Random(6)
    cases = [task["params"] for task in generated(extra.overdue_account)]
    cases += [{"balance": rng.randint(1, 100000) / 100, "rate_percent": rng.choice([0.5, 1, 1.25, 1.5, 2, 3]),
               "months": rng.randint(0, 24)} for _ in range(300)]
    for p in cases:
        exact = sympy.Rational(str(p["balance"])) * (1 + sympy.Rational(str(p["rate_percent"])) / 100) ** p["months"]
        pence = int(sympy.floor(exact * 100 + sympy.Rational(1, 2)))
        assert extra.overdue_account.solve(**p) == f"{pence // 100}.{pence % 100:02d}"
    # Worked by hand: £100 at 1% a month for 2 months: 100 x 1.01 x 1.01 = 102.01.
    assert extra.overdue_account.solve(100, 1, 2) == "102.01"


def test_ice_reorder_follows_the_reorder_point_rule():
    # Common practice (from memory): reorder point = usage over the delivery lead time + safety stock, and
    # an order-up-to level. Checked two ways written afresh here: stock left when a delivery would land if
    # nothing were ordered today (reorder when that is at or below the safety stock), and the smallest
    # number of whole 40-bag pallets that reaches the top-up level, found by counting pallets one by one.
    rng = random.Random(8)
    cases = [task["params"] for task in generated(extra.ice_reorder)]
    cases += [{"stock": rng.randint(0, 400), "daily_use": rng.randint(0, 60), "lead_days": rng.randint(0, 6),
               "safety_stock": rng.randint(0, 120), "max_level": rng.randint(0, 600)} for _ in range(500)]
    for p in cases:
        left_at_delivery = p["stock"] - p["daily_use"] * p["lead_days"]
        expected = 0
        if left_at_delivery <= p["safety_stock"]:
            while p["stock"] + expected < p["max_level"]:
                expected += 40
        assert extra.ice_reorder.solve(**p) == expected
    # Worked by hand: 30 bags, 60 a day, 1 day lead, 20 reserve: point 80, so order; 155 - 30 = 125 bags is
    # 3.125 pallets, so 4 pallets = 160 bags.
    assert extra.ice_reorder.solve(30, 60, 1, 20, 155) == 160
    assert extra.ice_reorder.solve(81, 60, 1, 20, 155) == 0


# --- check digits and codes ---------------------------------------------------------------------------------

def test_card_digit_matches_stdnum_luhn():
    # Source: python-stdnum, stdnum.luhn.is_valid: exactly one digit in the gap passes, and it is the answer.
    from stdnum import luhn

    for task in generated(extra.card_digit):
        digits = "".join(c for c in task["params"]["card"] if c.isdigit() or c == "?")
        passing = [d for d in range(10) if luhn.is_valid(digits.replace("?", str(d)))]
        assert passing == [task["answer"]]
    rng = random.Random(2)
    for _ in range(300):  # gap at the end: the usual check digit
        body = "".join(rng.choice("0123456789") for _ in range(rng.randint(5, 18)))
        assert extra.card_digit.solve(body + "?") == int(luhn.calc_check_digit(body))
    # Worked example quoted widely for the Luhn check (from memory): 7992739871 has check digit 3.
    assert extra.card_digit.solve("7992739871?") == 3


def test_pilot_isbn_matches_stdnum():
    # Source: python-stdnum, stdnum.isbn.to_isbn13 (and isbn.is_valid on the generated 10-character ISBNs).
    from stdnum import ean, isbn

    for task in generated(extra.pilot_isbn, count=300):
        old = task["params"]["isbn10"]
        assert isbn.is_valid(old) and len(isbn.compact(old)) == 10
        assert task["answer"] == isbn.compact(isbn.to_isbn13(old))
        assert ean.is_valid(task["answer"])
    assert any("X" in t["params"]["isbn10"] for t in generated(extra.pilot_isbn, count=300))
    # A commonly quoted pair (from memory), cross-checked by stdnum above: 0-306-40615-2 -> 978-0-306-40615-7.
    assert extra.pilot_isbn.solve("0-306-40615-2") == "9780306406157"


def test_supplier_iban_matches_stdnum():
    # Source: python-stdnum, stdnum.iban.calc_check_digits (the ISO 13616 mod-97 check digits; it ignores the
    # check digits in the number given) and stdnum.iban.is_valid for countries whose BBAN carries no national
    # check of its own in stdnum's tables (GB, IE here).
    from stdnum import iban

    for task in generated(extra.supplier_iban, count=300):
        answer = task["answer"]
        assert answer[2:4] == iban.calc_check_digits(answer[:2] + "00" + answer[4:])
        if answer[:2] in ("GB", "IE"):
            assert iban.is_valid(answer)
    # The example IBAN printed in many bank leaflets (from memory), cross-checked by stdnum:
    assert extra.supplier_iban.solve("GB", "NWBK 6016 1331 9268 19") == "GB29NWBK60161331926819"
    assert iban.is_valid("GB29NWBK60161331926819")
    # the invented example in the family description
    assert extra.supplier_iban.solve("GB", "KELP 2046 1187 3355 09") == "GB03KELP20461187335509"
    assert iban.is_valid("GB03KELP20461187335509")


def test_cheque_words_match_num2words():
    # Source: num2words (PyPI), num2words(n) in its default British English: "and" before the last part under
    # a hundred, a comma after "thousand" when hundreds follow, hyphens in compound tens.
    from num2words import num2words

    for n in list(range(1, 2000)) + list(range(2000, 1_000_000, 97)) + [999_999, 100_000, 100_005, 10_000]:
        assert extra.cheque_words.solve(n) == num2words(n), n
    for task in generated(extra.cheque_words):
        assert task["answer"] == num2words(task["params"]["pounds"])


# --- calendar and clock --------------------------------------------------------------------------------------

def test_licence_expiry_matches_dateutil_relativedelta():
    # Source: dateutil.parser.parse reads the month-name dates, dateutil.relativedelta(months=n) adds months
    # and keeps the day, or the month's last day when the month is shorter.
    from dateutil.parser import parse
    from dateutil.relativedelta import relativedelta

    tasks = generated(extra.licence_expiry, count=300)
    for task in tasks:
        p = task["params"]
        assert task["answer"] == (parse(p["start"]).date() + relativedelta(months=p["months"])).isoformat()
    assert any(int(t["answer"][-2:]) != parse(t["params"]["start"]).day for t in tasks)  # cut-backs occur
    # Worked by hand: a month from 31 January runs to the last day of February (29th in a leap year).
    assert extra.licence_expiry.solve("31 January 2027", 1) == "2027-02-28"
    assert extra.licence_expiry.solve("January 31, 2028", 1) == "2028-02-29"


def _zone(offset: str):
    from zoneinfo import ZoneInfo

    hours = extra.passage_arrival.offset_hours(offset)
    # IANA's Etc/GMT zones carry the POSIX sign: Etc/GMT-2 is two hours ahead of UTC
    return ZoneInfo("Etc/GMT" + ("" if hours == 0 else f"{-hours:+d}"))


def test_passage_arrival_matches_zoneinfo_and_dateutil():
    # Source: dateutil.parser.parse for the month-name date and time; the standard library's zoneinfo with the
    # IANA time zone database (fixed-offset Etc/GMT zones) for the clocks at each end; arithmetic in UTC.
    from dateutil.parser import parse

    for task in generated(extra.passage_arrival, count=300):
        p = task["params"]
        leave = parse(f"{p['depart_date']} {p['depart_time']}").replace(tzinfo=_zone(p["from_offset"]))
        at_sea = dt.timedelta(hours=p["hours"], minutes=p["minutes"])
        arrive = (leave.astimezone(dt.timezone.utc) + at_sea).astimezone(_zone(p["to_offset"]))
        assert task["answer"] == arrive.strftime("%Y-%m-%d %H:%M")
    # Worked by hand: 22:40 on 30 April at UTC+1 is 21:40 UTC; 5 h 30 min later is 03:10 UTC on 1 May,
    # which is 23:10 on 30 April at UTC-4.
    assert extra.passage_arrival.solve("30 April 2026", "22:40", "UTC+1", "UTC-4", 5, 30) == "2026-04-30 23:10"
    assert extra.passage_arrival.solve("30 April 2026", "22:40", "UTC+1", "UTC+3", 5, 30) == "2026-05-01 06:10"


# --- lists, routes and rankings -------------------------------------------------------------------------------

def test_landing_tally_matches_an_independent_count():
    # Common practice: a tally is a plain sum. Checked with collections.Counter over (species, boxes) pairs
    # and on one landing book counted by hand.
    from collections import Counter

    for task in generated(extra.landing_tally):
        counter: Counter[str] = Counter()
        for entry in task["params"]["landings"]:
            counter[entry["species"]] += entry["boxes"]
        assert task["answer"] == counter[task["params"]["species"]] > 0
    lengths = {len(t["params"]["landings"]) for t in generated(extra.landing_tally)}
    assert len(lengths) >= 5  # the number of entries varies
    book = [{"boat": "Thrift", "boxes": 5, "species": "crab"}, {"boat": "Thrift", "boxes": 7, "species": "ling"},
            {"boat": "Gannet", "boxes": 25, "species": "crab"}, {"boat": "Fulmar", "boxes": 32, "species": "crab"}]
    assert extra.landing_tally.solve(book, "crab") == 62  # 5 + 25 + 32, by hand


def test_mooring_route_matches_networkx():
    # Source: networkx.shortest_path_length with weight= (Dijkstra) on an undirected graph of the legs;
    # networkx.NetworkXNoPath where the chart has no way through.
    import networkx as nx

    tasks = generated(extra.mooring_route)
    rng = random.Random(12)
    cases = [t["params"] for t in tasks]
    for _ in range(300):  # arbitrary charts, some in pieces
        places = [f"P{i}" for i in range(rng.randint(2, 8))]
        legs = [[*rng.sample(places, 2), rng.randint(1, 20)] for _ in range(rng.randint(1, 12))]
        cases.append({"legs": legs, "start": places[0], "end": places[1]})
    for p in cases:
        graph = nx.Graph()
        graph.add_nodes_from([p["start"], p["end"]])
        for a, b, cables in p["legs"]:  # of two legs between the same places the shorter one counts
            if not graph.has_edge(a, b) or graph[a][b]["weight"] > cables:
                graph.add_edge(a, b, weight=cables)
        try:
            expected = nx.shortest_path_length(graph, p["start"], p["end"], weight="weight")
        except nx.NetworkXNoPath:
            with pytest.raises(ValueError):
                extra.mooring_route.solve(**p)
            continue
        assert extra.mooring_route.solve(**p) == expected
    assert len({len(t["params"]["legs"]) for t in tasks}) >= 4  # the number of legs varies


def test_regatta_ranking_matches_numpy_lexsort():
    # Source: numpy.lexsort (last key is the primary one): total points, then more firsts, more seconds, ...,
    # then the better place in the last race. The low-points scoring and count-back tie-break are common
    # practice in club racing (from memory); the family description states the exact rule used here.
    import numpy as np

    for task in generated(extra.regatta_ranking):
        results, position = task["params"]["results"], task["params"]["position"]
        boats = list(results)
        n = len(boats)
        keys = [[results[b][-1] for b in boats]]  # weakest key first
        keys += [[-results[b].count(k) for b in boats] for k in range(n, 0, -1)]
        keys += [[sum(results[b]) for b in boats]]
        order = np.lexsort(np.array(keys))
        assert task["answer"] == boats[order[position - 1]]
    # Worked by hand: both on 5 points; Turnstone has a first place and Eelgrass none, so Turnstone ranks first.
    two_races = {"Eelgrass": [3, 2], "Turnstone": [4, 1], "Saltwort": [5, 3], "Sanderling": [1, 5], "Fulmar": [2, 4]}
    assert extra.regatta_ranking.solve(two_races, 1) == "Turnstone"
    assert extra.regatta_ranking.solve(two_races, 5) == "Saltwort"


# --- committed sample files and the split -----------------------------------------------------------------

def test_extra_files_parse_and_fit_together():
    assert len(EXTRA_FAMILIES) >= 12 and not set(EXTRA_FAMILIES) & set(FAMILIES)
    demo_questions = {r["question"] for name in FAMILIES for part in ("examples", "test")
                      for r in _read_jsonl(SAMPLES / name / f"{part}.jsonl")}
    for name, module in EXTRA_FAMILIES.items():
        folder = SAMPLES / "extra" / name
        meta = tomllib.loads((folder / "family.toml").read_text(encoding="utf-8"))
        assert meta == {"name": module.NAME, "description": module.DESCRIPTION}
        examples, tests = _read_jsonl(folder / "examples.jsonl"), _read_jsonl(folder / "test.jsonl")
        assert len(examples) == 9 and len(tests) == 30
        rows = examples + tests
        assert all(set(r) == {"id", "question", "answer"} and type(r["answer"]) in (int, str) for r in rows)
        assert len({r["question"] for r in rows}) == len(rows) and len({r["id"] for r in rows}) == len(rows)
        assert not {r["question"] for r in rows} & demo_questions
        assert len({r["answer"] for r in examples}) >= 2
    # `make demo` globs samples/*/examples.jsonl: none of the second collection sits at that depth
    assert not {p.parent.name for p in SAMPLES.glob("*/examples.jsonl")} & set(EXTRA_FAMILIES)


def test_split_rule_is_seeded_and_deals_each_collection_into_both_halves():
    halves = make_samples.split()
    assert halves == make_samples.split()
    assert tomllib.loads(make_samples.render_split()) == halves
    for collection in (FAMILIES, EXTRA_FAMILIES):
        in_tuning = set(collection) & set(halves["tuning"])
        assert abs(2 * len(in_tuning) - len(collection)) <= 2
        assert set(collection) - in_tuning <= set(halves["check"])
    for _, (a, b) in make_samples.SPREAD:
        assert (a in halves["tuning"]) != (b in halves["tuning"])


def test_split_record_covers_every_family_once_with_demo_families_in_both_halves():
    split = tomllib.loads((SAMPLES / "split.toml").read_text(encoding="utf-8"))
    assert set(split) == {"tuning", "check"}
    tuning, check = split["tuning"], split["check"]
    every = set(FAMILIES) | set(EXTRA_FAMILIES)
    assert sorted(tuning + check) == sorted(every) and not set(tuning) & set(check)
    assert abs(len(tuning) - len(check)) <= 2
    for _, (a, b) in make_samples.SPREAD:  # kinds the builder has failed on sit in both halves
        assert (a in tuning) != (b in tuning)
    for collection in (FAMILIES, EXTRA_FAMILIES):
        assert set(collection) & set(tuning) and set(collection) & set(check)


@pytest.mark.parametrize("name", sorted(n for n, m in EXTRA_FAMILIES.items() if hasattr(m, "case")))
def test_each_third_of_the_examples_shows_two_cases_of_the_rule(name):
    module = EXTRA_FAMILIES[name]
    rng = random.Random(f"{make_samples.EXTRA_SEED}:{name}:examples")
    examples = make_samples._draw_thirds(module, rng, set())
    committed = _read_jsonl(SAMPLES / "extra" / name / "examples.jsonl")
    assert [t["question"] for t in examples] == [r["question"] for r in committed]
    for third in (examples[0:3], examples[3:6], examples[6:9]):
        assert len({module.case(t) for t in third}) >= 2
