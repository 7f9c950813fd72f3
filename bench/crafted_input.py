"""Time on crafted text beside ordinary prose of the same size, one core.

The paths below once took time that grew faster than linearly in crafted input (runs of flags
for grapheme clusters, "a.a.a…a" for the abbreviation learner, "Dr. A Dr. A …" and
"a.a.a…a! A" for punctuation sentences); the default segmenter, which did not, is shown on
the same inputs for comparison. For every path and crafted input, at each size (MB of
UTF-8), the script prints the least CPU time of several runs (ms) and its MB/s on the crafted text
and on ordinary English prose (Debian's English fortunes, repeated to the size), and their
ratio. Linear time shows as MB/s that holds level as the size doubles, and so does the ratio;
quadratic time halves MB/s at each doubling. The cut of ASCII prose takes a shortcut (in ASCII
only CR LF is a cluster of two), so its ratio is large up to 0.23 MB, where the English
fortunes hold their first non-ASCII character; larger sizes take the general path.

    python bench/crafted_input.py [--sizes 0.125 0.25 0.5] [--repeats 3]
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from segmentation import english_fortunes

from corpusmill.ingest import _grapheme_cut
from corpusmill.segment import Segmenter
from corpusmill.unicode_breaks import learn_abbreviations

FLAG = "\U0001F1E6"  # REGIONAL INDICATOR SYMBOL LETTER A, 4 bytes in UTF-8
ABBREVIATIONS = frozenset({"dr", "mr", "e.g", "etc"})


def flags(size: int) -> str:
    return FLAG * (size // 4)


def letters_between_periods(size: int) -> str:
    return "a." * (size // 2 - 1) + "a"


def letters_between_periods_then_bang(size: int) -> str:
    return "a." * (size // 2 - 4) + "a! A"


def abbreviations_before_capitals(size: int) -> str:
    return "Dr. A " * (size // 6)


# (path, crafted input, function of the text). The oversize cut is given the UTF-8 bytes of a
# document exactly as long as corpus.max_document_bytes, as the reader gives it one.
CASES: list[tuple[str, Callable[[int], str], Callable[[str], object]]] = [
    ("oversize cut (ingest)", flags, lambda text: _grapheme_cut(text.encode("utf-8"))),
    ("learn_abbreviations", letters_between_periods, lambda text: learn_abbreviations([text])),
    ("segment words: pattern", flags, Segmenter(words_mode="pattern").segment),
    ("segment default (uax29)", flags, Segmenter().segment),
    ("segment default (uax29)", letters_between_periods, Segmenter(abbreviations=ABBREVIATIONS).segment),
    ("segment sentences: punctuation", abbreviations_before_capitals,
     Segmenter(sentences_mode="punctuation", words_mode="pattern", abbreviations=ABBREVIATIONS).segment),
    ("segment sentences: punctuation", letters_between_periods_then_bang,
     Segmenter(sentences_mode="punctuation", words_mode="pattern", abbreviations=ABBREVIATIONS).segment),
]  # fmt: skip


def ordinary(prose: str, size: int) -> str:
    """`size` bytes of English prose (the fortunes repeated), cut at a character boundary."""
    repeated = prose * (size // len(prose) + 1)
    return repeated.encode("utf-8")[:size].decode("utf-8", errors="ignore")


def best_seconds(function: Callable[[str], object], text: str, repeats: int) -> float:
    """Least CPU time per call over `repeats` runs (other processes only ever slow a run down);
    a run repeats a call that takes under 10 ms until it lasts about that long, as the clock
    counts in steps of microseconds."""
    start = time.process_time()
    function(text)
    calls = max(1, int(0.01 / max(time.process_time() - start, 1e-6)))
    best = float("inf")
    for _ in range(repeats):
        start = time.process_time()
        for _ in range(calls):
            function(text)
        best = min(best, (time.process_time() - start) / calls)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=float, nargs="+", default=[0.125, 0.25, 0.5], help="MB of UTF-8 text")
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    prose = english_fortunes()
    print(f"best of {args.repeats} runs, CPU time, one core; ordinary = English fortunes of the same size")
    print(f"{'path':32s} {'crafted input':34s} {'MB':>6s} {'crafted ms':>11s} {'MB/s':>8s} "
          f"{'ordinary ms':>11s} {'MB/s':>8s} {'ratio':>8s}")  # fmt: skip
    for path, crafted, function in CASES:
        for megabytes in args.sizes:
            size = int(megabytes * 1_000_000)
            text, plain = crafted(size), ordinary(prose, size)
            seconds, plain_seconds = best_seconds(function, text, args.repeats), best_seconds(function, plain, args.repeats)
            mb, plain_mb = len(text.encode("utf-8")) / 1e6, len(plain.encode("utf-8")) / 1e6
            print(f"{path:32s} {crafted.__name__:34s} {mb:6.3f} {seconds * 1e3:11.3f} {mb / seconds:8.1f} "
                  f"{plain_seconds * 1e3:11.3f} {plain_mb / plain_seconds:8.1f} {seconds / plain_seconds:8.1f}", flush=True)  # fmt: skip


if __name__ == "__main__":
    main()
