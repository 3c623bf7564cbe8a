"""Supplier IBAN: a supplier abroad gives a country code and a domestic account number; the co-op writes the
IBAN with its two mod-97 check digits."""

from __future__ import annotations

import random
import string

from samples.families._common import pick

from ._names import PORTS

NAME = "supplier_iban"
DESCRIPTION = (
    "An IBAN is the two-letter country code, two check digits, then the domestic account number (BBAN). For "
    "the check digits, put the country code and 00 after the BBAN, turn letters into numbers (A=10, B=11, ... "
    "Z=35), take that number mod 97 and subtract the remainder from 98; always write two digits. Answer the "
    "IBAN with no spaces, e.g. GB03KELP20461187335509."
)

# country -> (letters, digits) at the start of its domestic account number, as the co-op's suppliers write them
FORMATS = {"GB": (4, 14), "IE": (4, 14), "NL": (4, 10), "NO": (0, 11), "DK": (0, 14), "DE": (0, 18),
           "FI": (0, 14), "IS": (0, 22)}


def check_digits(country: str, bban: str) -> str:
    moved = bban + country + "00"
    number = int("".join(str(int(c, 36)) for c in moved))
    return f"{98 - number % 97:02d}"


def solve(country: str, bban: str) -> str:
    country = country.strip().upper()
    bban = "".join(bban.split()).upper()
    if len(country) != 2 or not country.isalpha() or not bban.isalnum():
        raise ValueError(f"not a country code and account number: {country!r} {bban!r}")
    return country + check_digits(country, bban) + bban


def _grouped(rng: random.Random, bban: str) -> str:
    return bban if rng.random() < 0.5 else " ".join(bban[i:i + 4] for i in range(0, len(bban), 4))


_QUESTIONS = [
    "Paying the net maker in {port}: the bank says country {cc}, account number {b}. What IBAN goes on the "
    "transfer?",
    "Supplier bank details from {port}: {cc}, domestic account {b}. Write out the full IBAN.",
    "Transfer form needs an IBAN. Country code {cc}, BBAN {b}. What is it, without spaces?",
    "The {port} chandler's invoice gives account {b} in country {cc} but no IBAN. Work it out.",
]


def generate(rng: random.Random) -> dict:
    country = rng.choice(sorted(FORMATS))
    letters, digits = FORMATS[country]
    bban = "".join(rng.choice(string.ascii_uppercase) for _ in range(letters))
    bban += "".join(rng.choice(string.digits) for _ in range(digits))
    params = {"country": country, "bban": _grouped(rng, bban)}
    question = pick(rng, _QUESTIONS).format(port=rng.choice(PORTS), cc=country, b=params["bban"])
    return {"question": question, "answer": solve(**params), "params": params}
