"""Time of every text path on crafted text: its growth as the text quadruples, and against prose.

For every path of TEXT_FUNCTIONS and every crafted text of PATHOLOGICAL (both in tests/hostile.py,
whose outputs tests/test_untrusted.py checks), and for the UAX #29 break functions
(BREAK_FUNCTIONS) on inputs aimed at each rule that looks ahead or behind (RULE_LOOKAHEAD), the script prints the least CPU time of several
runs on the text made for sizes s and 4s (characters), the growth (about 4 when the path is
linear, 16 when quadratic), and the ratio of the time at 4s to that on ordinary English prose
(Debian's English fortunes, repeated) of 4s characters. A last line does the same for cleaning
one letter under s and 4s combining marks (tests/hostile.combining_run; NFC of 100,000 such marks
took minutes before cleaning made the text stream-safe). These paths once took time that grew
faster than linearly: grapheme cuts and words on runs of flags, abbreviation learning on
"a.a.a…a", punctuation sentences on "Dr. A Dr. A …" and "a.a.a…a! A".

A row is flagged (common practice for growth tests: quadratic shows 16, so allow up to 10; a
sentence-dense text pays a per-sentence cost, so allow 25 times prose) when its time at 4s is
above FLOOR_S and its growth is over 10 or its ratio over 25. Below FLOOR_S fast paths and the
allocator dominate (the fortunes' first 0.23 MB are ASCII, on which cleaning and the cut take
shortcuts), so for the flags smaller times count as FLOOR_S (prose) and FLOOR_S / 4 (size s);
the table prints the measured growth and the ratio as flagged. The exit status is 1 when any row
is flagged. The test suite does not run this script: a shared machine's load can slow any run.

    python bench/crafted_input.py [--size 30000] [--marks 100000] [--repeats 3]
"""

from __future__ import annotations

import argparse
import gc
import sys
import time
from collections.abc import Callable
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from segmentation import english_fortunes

from corpusmill.clean import CleanOptions, clean_text
from tests.hostile import BREAK_FUNCTIONS, PATHOLOGICAL, RULE_LOOKAHEAD, TEXT_FUNCTIONS, combining_run

FLOOR_S = 5e-3
MAX_GROWTH = 10
MAX_RATIO = 25


def ordinary(prose: str, length: int) -> str:
    """`length` characters of English prose (the fortunes repeated)."""
    return (prose * (length // len(prose) + 1))[:length]


def best_seconds(function: Callable[[str], object], text: str, repeats: int) -> float:
    """Least CPU time per call over `repeats` runs (other processes only ever slow a run down),
    with the garbage collector paused (a collection would charge a run for older garbage); a run
    repeats a call that takes under 10 ms until it lasts about that long, as the clock counts in
    steps of microseconds."""
    gc.collect()
    gc.disable()
    try:
        start = time.process_time()
        function(text)
        calls = max(1, int(0.01 / max(time.process_time() - start, 1e-6)))
        best = float("inf")
        for _ in range(repeats):
            start = time.process_time()
            for _ in range(calls):
                function(text)
            best = min(best, (time.process_time() - start) / calls)
    finally:
        gc.enable()
    return best


def row(path: str, case: str, small: float, large: float, plain: float) -> bool:
    """Print one row; returns whether it is flagged. The growth printed is the measured one; in
    the flag, a time at s below FLOOR_S / 4 counts as FLOOR_S / 4, as prose below FLOOR_S counts
    as FLOOR_S in the ratio printed and flagged."""
    growth, ratio = large / small, large / max(plain, FLOOR_S)
    flags = []
    if large > FLOOR_S and large / max(small, FLOOR_S / 4) > MAX_GROWTH:
        flags.append(f"growth > {MAX_GROWTH}")
    if large > FLOOR_S and ratio > MAX_RATIO:
        flags.append(f"ratio > {MAX_RATIO}")
    print(f"{path:34s} {case:34s} {small * 1e3:10.3f} {large * 1e3:10.3f} {growth:7.1f} {plain * 1e3:10.3f} {ratio:7.1f}  "
          f"{'FLAGGED: ' + ', '.join(flags) if flags else ''}", flush=True)  # fmt: skip
    return bool(flags)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=30_000, help="s: characters of the smaller crafted text")
    parser.add_argument("--marks", type=int, default=100_000, help="s for the combining marks under one letter")
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    prose = english_fortunes()
    print(f"best of {args.repeats} runs, CPU time, one core; s = {args.size} characters; prose = English fortunes of 4s characters")
    floor = f"{FLOOR_S * 1e3:g} ms"
    print(f"ratio = time at 4s / prose time (at least {floor}); flagged: growth > {MAX_GROWTH} or ratio > {MAX_RATIO}, time at 4s above {floor}")
    print(f"{'path':34s} {'crafted input':34s} {'ms at s':>10s} {'ms at 4s':>10s} {'growth':>7s} {'prose ms':>10s} {'ratio':>7s}")
    flagged = []
    for functions, inputs in ((TEXT_FUNCTIONS, PATHOLOGICAL), (BREAK_FUNCTIONS, RULE_LOOKAHEAD)):
        for path, function in functions.items():
            plain = best_seconds(function, ordinary(prose, 4 * args.size), args.repeats)
            for case, make in inputs.items():
                small, large = (best_seconds(function, make(size), args.repeats) for size in (args.size, 4 * args.size))
                if row(path, case, small, large, plain):
                    flagged.append(f"{path} / {case}")

    def clean(text: str) -> str:
        return clean_text(text, CleanOptions())

    texts = [combining_run(marks) for marks in (args.marks, 4 * args.marks)]
    small, large = (best_seconds(clean, text, args.repeats) for text in texts)
    if row("clean_text (NFC)", f"combining_run({args.marks})", small, large, best_seconds(clean, ordinary(prose, len(texts[1])), args.repeats)):
        flagged.append("clean_text (NFC) / combining_run")
    print(f"flagged: {len(flagged)}" + "".join(f"\n  {name}" for name in flagged))
    sys.exit(1 if flagged else 0)


if __name__ == "__main__":
    main()
