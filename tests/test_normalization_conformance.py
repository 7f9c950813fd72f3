"""UAX #15 conformance of steps.clean.normalize against the Unicode NormalizationTest.txt.

The test file (Debian's unicode-data, Unicode 15.0) is newer than Python 3.11's unicodedata
(Unicode 14.0): lines holding a code point unassigned there (category Cn) are skipped, and
their number is bounded.
"""

from __future__ import annotations

import bz2
import functools
import gzip
import os
import sys
import unicodedata
from pathlib import Path

import pytest

from corpusmill.clean import normalize

UNICODE_DIR = Path("/usr/share/unicode")
#: Lines of Unicode 15.0 additions that may be skipped (82 of 19,074 with Unicode 14.0).
MAX_SKIPPED_LINES = 100

# The invariants of the file header, section CONFORMANCE 1: for each form, which column every
# listed column normalizes to (columns are 1-based: source; NFC; NFD; NFKC; NFKD).
INVARIANTS = {
    "NFC": {1: 2, 2: 2, 3: 2, 4: 4, 5: 4},
    "NFD": {1: 3, 2: 3, 3: 3, 4: 5, 5: 5},
    "NFKC": {1: 4, 2: 4, 3: 4, 4: 4, 5: 4},
    "NFKD": {1: 5, 2: 5, 3: 5, 4: 5, 5: 5},
}


@functools.cache
def normalization_test() -> tuple[list[tuple[list[str], str]], frozenset[int]]:
    """(columns, line) of every test line, and the code points listed in Part 1."""
    path = next(
        (UNICODE_DIR / f"NormalizationTest.txt{s}" for s in ("", ".bz2", ".gz")
         if (UNICODE_DIR / f"NormalizationTest.txt{s}").exists()),
        None,
    )  # fmt: skip
    if path is None:
        message = f"NormalizationTest.txt not found under {UNICODE_DIR} (install Debian's unicode-data)"
        if os.environ.get("CI") == "true":
            pytest.fail(message)
        pytest.skip(message)
    opener = {".bz2": bz2.open, ".gz": gzip.open}.get(path.suffix, open)
    lines = []
    part1 = set()
    part = ""
    with opener(path, "rt", encoding="utf-8") as file:
        for line in file:
            if line.startswith("@"):
                part = line.split()[0]
                continue
            data = line.split("#", 1)[0].strip()
            if not data:
                continue
            columns = ["".join(chr(int(cp, 16)) for cp in field.split()) for field in data.split(";")[:5]]
            lines.append((columns, line.strip()))
            if part == "@Part1":
                part1.add(ord(columns[0]))
    return lines, frozenset(part1)


def unassigned(text: str) -> bool:
    return any(unicodedata.category(c) == "Cn" for c in text)


@pytest.mark.parametrize("form", INVARIANTS)
def test_normalization_test_lines(form: str) -> None:
    """Every line satisfies the file's invariants for one form.

    Source: UAX #15 "Unicode Normalization Forms"; NormalizationTest.txt header, CONFORMANCE
    part 1 (e.g. for NFC: c2 == toNFC(c1) == toNFC(c2) == toNFC(c3), c4 == toNFC(c4) == toNFC(c5)).
    """
    lines, _ = normalization_test()
    assert len(lines) > 19_000
    usable = [(columns, line) for columns, line in lines if not unassigned("".join(columns))]
    assert len(lines) - len(usable) <= MAX_SKIPPED_LINES
    failures = [
        f"{line}\n    {form}(c{source}) != c{target}"
        for columns, line in usable
        for source, target in INVARIANTS[form].items()
        if normalize(columns[source - 1], form) != columns[target - 1]
    ]
    assert not failures, f"{len(failures)} failures:\n" + "\n".join(failures[:20])


def test_code_points_outside_part1_are_unchanged() -> None:
    """Every assigned code point not listed in Part 1 is its own NFC, NFD, NFKC and NFKD.

    Source: NormalizationTest.txt header, CONFORMANCE part 2 (X == toNFC(X) == toNFD(X) ==
    toNFKC(X) == toNFKD(X)); unassigned (Cn) and surrogate (Cs) code points are left out.
    """
    _, part1 = normalization_test()
    assert len(part1) > 10_000
    failures = [
        f"U+{cp:04X} {form}"
        for cp in range(sys.maxunicode + 1)
        if cp not in part1 and unicodedata.category(chr(cp)) not in ("Cn", "Cs")
        for form in INVARIANTS
        if normalize(chr(cp), form) != chr(cp)
    ]
    assert not failures, failures[:20]
