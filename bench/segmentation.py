"""Throughput of steps.unicode_breaks on real English text, one core.

Reads about 20 MB of Debian's GNU Collaborative International Dictionary of English (dictzip,
which gzip reads) or a UTF-8 file given on the command line, and prints MB/s (of UTF-8
input) for word tokens, sentences and grapheme splitting, next to a plain split at UAX #29
word boundaries as a yardstick of the machine's speed; the best of several runs counts
because other processes on the machine only ever slow a run down.

    python bench/segmentation.py [PATH | --fortunes] [--megabytes 20] [--repeats 3]

`--fortunes` measures ordinary English prose instead: the English fortune files of Debian's
`fortunes` packages (every plain file in FORTUNES but the Chinese ones and the ASCII pictures),
concatenated, about 2 MB.
"""

from __future__ import annotations

import argparse
import gzip
import sys
import time
from collections.abc import Callable
from pathlib import Path

import regex

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from corpusmill.unicode_breaks import sentence_segments, split_graphemes, word_tokens

GCIDE = Path("/usr/share/dictd/gcide.dict.dz")
FORTUNES = Path("/usr/share/games/fortunes")
NOT_ENGLISH_PROSE = frozenset({"chinese", "tang300", "song100", "art", "ascii-art"})
ABBREVIATIONS = frozenset("dr mr mrs ms prof st no vol fig approx etc e.g i.e vs cf".split())


def read_text(path: Path | None, megabytes: float) -> str:
    """The first `megabytes` of the file, decoded (a cut character at the end is dropped)."""
    source = path or GCIDE
    limit = int(megabytes * 1_000_000)
    opener = gzip.open if source.suffix in (".dz", ".gz") else open
    with opener(source, "rb") as file:
        return file.read(limit).decode("utf-8", errors="ignore")


def english_fortunes() -> str:
    """The English fortune files, in name order, concatenated."""
    files = sorted(p for p in FORTUNES.iterdir() if p.is_file() and p.suffix not in (".dat", ".u8") and p.name not in NOT_ENGLISH_PROSE)
    if not files:
        raise SystemExit(f"no fortune files in {FORTUNES}; install Debian's fortunes package")
    return "".join(p.read_text(encoding="utf-8", errors="replace") for p in files)


def best_seconds(func: Callable[[str], list[str]], text: str, repeats: int) -> tuple[float, int]:
    """Least CPU time over `repeats` runs, and the number of pieces produced."""
    best = float("inf")
    pieces = 0
    for _ in range(repeats):
        start = time.process_time()
        pieces = len(func(text))
        best = min(best, time.process_time() - start)
    return best, pieces


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("path", nargs="?", type=Path, help=f"UTF-8 text (default: {GCIDE})")
    parser.add_argument("--fortunes", action="store_true", help=f"English prose from {FORTUNES}")
    parser.add_argument("--megabytes", type=float, default=20.0)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    text = english_fortunes() if args.fortunes else read_text(args.path, args.megabytes)
    size = len(text.encode("utf-8")) / 1e6
    source = f"English fortunes in {FORTUNES}" if args.fortunes else args.path or GCIDE
    print(f"{size:.1f} MB of {source}, best of {args.repeats} runs, one core")
    sentences = sentence_segments(text)  # the pipeline tokenizes one sentence at a time
    measures: dict[str, Callable[[str], list[str]]] = {
        "reference: regex.split at \\b": lambda t: regex.split(r"\b", t, flags=regex.WORD | regex.V1),
        "word_tokens (keep, keep)": word_tokens,
        "word_tokens (split, split)": lambda t: word_tokens(t, apostrophes="split", hyphens="split"),
        "word_tokens (keep, keep) per sentence": lambda _: [w for s in sentences for w in word_tokens(s)],
        "sentence_segments": sentence_segments,
        "sentence_segments + abbreviations": lambda t: sentence_segments(t, ABBREVIATIONS),
        "split_graphemes (1000)": lambda t: split_graphemes(t, 1000),
    }
    for name, func in measures.items():
        seconds, pieces = best_seconds(func, text, args.repeats)
        print(f"{name:36s} {size / seconds:7.1f} MB/s  {pieces:>10,} pieces  {seconds:6.2f} s")


if __name__ == "__main__":
    main()
