"""ISO 6346 container codes: compute the check digit of owner code + serial number."""

from __future__ import annotations

import random
import re
import string

from ._common import BOATS, pick

NAME = "container_codes"
DESCRIPTION = (
    "Given a container's owner code and serial number (4 letters + 6 digits, e.g. ABCU123456), "
    "answer its ISO 6346 check digit (an integer 0-9)."
    " The rule (ISO 6346): letters count A=10, B=12, C=13, ... (from 10 upward, skipping 11, 22, 33: A10 B12 C13 D14 E15 F16 G17 H18 I19 J20 K21 L23 M24 N25 O26 P27 Q28 R29 S30 T31 U32 V34 W35 X36 Y37 Z38), digits count as themselves; multiply the value of the character at position i (0 to 9) by 2**i, add up, take the remainder mod 11, then mod 10."
)

_CODE10 = re.compile(r"^[A-Z]{3}[UJZ][0-9]{6}$")


def _letter_values() -> dict[str, int]:
    """A=10, B=12, ... Z=38: consecutive numbers from 10 that skip multiples of 11."""
    values, v = {}, 10
    for letter in string.ascii_uppercase:
        if v % 11 == 0:
            v += 1
        values[letter] = v
        v += 1
    return values


LETTER_VALUES = _letter_values()


def weighted_remainder(code10: str) -> int:
    """Sum of character values times 2**position, modulo 11."""
    code10 = code10.strip().upper()
    if not _CODE10.match(code10):
        raise ValueError(f"not an owner code + serial: {code10!r}")
    total = sum((LETTER_VALUES[c] if c.isalpha() else int(c)) * 2**i for i, c in enumerate(code10))
    return total % 11


def solve(code: str) -> int:
    """The check digit of a 10-character owner code + serial (a remainder of 10 gives 0)."""
    return weighted_remainder(code) % 10


def random_code10(rng: random.Random) -> str:
    """An invented owner code + serial. About one in eleven has the remainder 10, whose check digit the
    described rule makes 0 (common practice is to avoid issuing such serials, but they are in the domain)."""
    owner = "".join(rng.choice(string.ascii_uppercase) for _ in range(3)) + rng.choice("UUUUJZ")
    digits = "".join(rng.choice(string.digits) for _ in range(6))
    if rng.random() < 0.1:
        digits = "0" + digits[1:]
    return owner + digits


_QUESTIONS = [
    "What is the check digit of container code {c}?",
    "The box off the {boat} reads {c} but its check digit is smudged. Which digit should follow?",
    "Container {c} needs its ISO 6346 check digit. What is it?",
    "Work out the check digit for owner code and serial number {c}.",
    "A tally clerk copied {c} from a container landed by the {boat}. What check digit completes it?",
    "Gate log: box {c} came off the {boat} with the last digit of its plate scraped away. What digit belongs there?",
]


def generate(rng: random.Random) -> dict:
    code = random_code10(rng)
    question = pick(rng, _QUESTIONS).format(c=code, boat=rng.choice(BOATS))
    params = {"code": code}
    return {"question": question, "answer": solve(**params), "params": params}


CLASSES = {
    "remainder_10": "the weighted sum leaves 10 mod 11, so the check digit is 0",
    "remainder_0": "the weighted sum leaves 0 mod 11",
    "serial_leading_zeros": "the serial number starts with 0",
    "category_j_or_z": "the fourth letter is J or Z, not U",
}


def code_classes(code10: str) -> set[str]:
    """The boundary classes of an owner code + serial (shared with the yes/no family)."""
    found = set()
    r = weighted_remainder(code10)
    if r == 10:
        found.add("remainder_10")
    if r == 0:
        found.add("remainder_0")
    if code10[4] == "0":
        found.add("serial_leading_zeros")
    if code10[3] in "JZ":
        found.add("category_j_or_z")
    return found


def classes(task: dict) -> set[str]:
    """The boundary classes of one generated task (see CLASSES)."""
    return code_classes(task["params"]["code"])
