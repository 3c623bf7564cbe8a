"""ISO 6346 container codes: is a full 11-character code's check digit right?"""

from __future__ import annotations

import random

from ._common import BOATS, pick
from .container_codes import code_classes, random_code10, solve as check_digit

NAME = "container_valid"
DESCRIPTION = (
    "Given a full 11-character container code (4 letters, 6 digits, check digit, e.g. ABCU1234560), "
    "answer \"yes\" if its ISO 6346 check digit is correct and \"no\" otherwise."
    " The rule (ISO 6346): letters count A=10, B=12, C=13, ... (from 10 upward, skipping 11, 22, 33: A10 B12 C13 D14 E15 F16 G17 H18 I19 J20 K21 L23 M24 N25 O26 P27 Q28 R29 S30 T31 U32 V34 W35 X36 Y37 Z38), digits count as themselves; multiply the value of the character at position i (0 to 9) by 2**i, add up, take the remainder mod 11, then mod 10."
)


def solve(code: str) -> str:
    code = code.strip().upper()
    if len(code) != 11 or not code[10].isdigit():
        raise ValueError(f"not an 11-character container code: {code!r}")
    return "yes" if check_digit(code[:10]) == int(code[10]) else "no"


_QUESTIONS = [
    "Is container code {c} valid?",
    "The {boat} is landing box {c}. Is its check digit correct (yes or no)?",
    "Does {c} pass the ISO 6346 check digit test?",
    "A tally clerk wrote down container {c}. Is that a valid container number?",
    "Check container {c} from the {boat}: is the code valid?",
    "Yard check before the {boat} sails: one plate reads {c}. Does its check digit add up, yes or no?",
]


def _corrupt(rng: random.Random, code11: str) -> str:
    """A near miss: a wrong last digit, or two neighbouring serial digits swapped."""
    while True:
        if rng.random() < 0.6:
            bad = code11[:10] + str(rng.choice([d for d in range(10) if str(d) != code11[10]]))
        else:
            i = rng.randrange(4, 9)
            bad = code11[:i] + code11[i + 1] + code11[i] + code11[i + 2:]
        if solve(bad) == "no":
            return bad


def generate(rng: random.Random) -> dict:
    base = random_code10(rng)
    code = base + str(check_digit(base))
    if rng.random() < 0.5:
        code = _corrupt(rng, code)
    question = pick(rng, _QUESTIONS).format(c=code, boat=rng.choice(BOATS))
    params = {"code": code}
    return {"question": question, "answer": solve(**params), "params": params, "base": base}


CLASSES = {
    "valid": "the check digit is right",
    "wrong_last_digit": "the last digit is wrong",
    "swapped_serial_digits": "two neighbouring serial digits are swapped",
    "remainder_10": "the weighted sum leaves 10 mod 11, so the right check digit is 0",
    "serial_leading_zeros": "the serial number starts with 0",
    "category_j_or_z": "the fourth letter is J or Z, not U",
}


def classes(task: dict) -> set[str]:
    """The boundary classes of one generated task (see CLASSES)."""
    params, answer = task["params"], task["answer"]
    code = params["code"]
    found = code_classes(code[:10]) - {"remainder_0"}
    if answer == "yes":
        found.add("valid")
    elif code[:10] != task.get("base", code[:10]):
        found.add("swapped_serial_digits")
    else:
        found.add("wrong_last_digit")
    return found
