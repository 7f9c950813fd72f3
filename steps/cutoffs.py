"""`corpusmill cutoffs BUILD …`: what another vocabulary cutoff would give, without rebuilding.

It answers from two files of a finished build: stats/token_counts.parquet (train, dev and test
count of every token, most frequent in train first) and vocabulary.tsv. The new cutoff is the
build's own (from manifest.json; none without one) with the limits given on the command line
replaced; `off` removes a limit. The word list it implies is the one the vocabulary step would
choose, since both call steps.vocabulary.choose_size on the same counts.
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .formats import FormatError, Vocabulary, read_vocabulary
from .layout import Layout
from .vocabulary import Cutoff, choose_size


@dataclass(frozen=True)
class Figures:
    """Coverage figures of one word list over the stored counts."""

    ids: int
    words: int
    train_coverage: float
    dev_oov_rate: float
    test_oov_rate: float


@dataclass(frozen=True)
class Answer:
    """The build's word list and the proposed one side by side, and the words that would change."""

    cutoff: Cutoff
    current: Figures
    proposed: Figures
    entering: list[tuple[str, int]]
    leaving: list[tuple[str, int]]
    entering_total: int
    leaving_total: int

    def to_json(self) -> dict:
        return {
            "cutoff": {"min_count": self.cutoff.min_count, "max_size": self.cutoff.max_size, "coverage": self.cutoff.coverage},
            "current": self.current.__dict__,
            "proposed": self.proposed.__dict__,
            "entering": {"words": self.entering_total, "top": [list(pair) for pair in self.entering]},
            "leaving": {"words": self.leaving_total, "top": [list(pair) for pair in self.leaving]},
        }


def _share(part: int, whole: int) -> float:
    return part / whole if whole else 0.0


def figures(counts: pa.Table, known: np.ndarray, reserved: int, words: int) -> Figures:
    """|V|, train coverage and dev/test OOV rates when the rows marked `known` are the counted words."""
    train = counts["train"].to_numpy()
    dev, test = counts["dev"].to_numpy(), counts["test"].to_numpy()
    coverage = _share(int(train[known].sum()), int(train.sum()))
    dev_oov = _share(int(dev[~known].sum()), int(dev.sum()))
    test_oov = _share(int(test[~known].sum()), int(test.sum()))
    return Figures(reserved + words, words, coverage, dev_oov, test_oov)


def _top(counts: pa.Table, mask: np.ndarray, show: int) -> list[tuple[str, int]]:
    """The `show` most frequent train words among the marked rows (rows are already in count order)."""
    rows = np.flatnonzero(mask)[:show]
    return list(zip(counts["token"].take(rows).to_pylist(), counts["train"].to_numpy()[rows].tolist()))


@dataclass(frozen=True)
class WordList:
    """What the comparison needs of a vocabulary: how many ids precede the words, and the words."""

    reserved: int
    words: pa.Array

    @classmethod
    def of(cls, vocabulary: Vocabulary) -> WordList:
        start = vocabulary.first_word_id
        return cls(start, pa.array(vocabulary.tokens[start:], pa.string()))

    @classmethod
    def read(cls, path: Path) -> WordList:
        """The word list of a vocabulary.tsv (steps.formats.read_vocabulary checks it)."""
        try:
            vocabulary = read_vocabulary(path)
        except FormatError as error:
            raise SystemExit(f"corpusmill: {error}") from None
        if vocabulary.units != "word":
            raise SystemExit(f"corpusmill: {path}: a subword vocabulary; cutoffs apply to word vocabularies (units: word)")
        return cls.of(vocabulary)


def what_if(counts: pa.Table, vocabulary: WordList, cutoff: Cutoff, show: int) -> Answer:
    """Compare the build's word list with the one `cutoff` would choose from the same counts."""
    words, start = vocabulary.words, vocabulary.reserved
    current = np.zeros(counts.num_rows, dtype=bool)
    head = counts["token"].slice(0, len(words))
    if len(head) == len(words) and pc.all(pc.equal(head, words)).as_py() in (True, None):
        current[: len(words)] = True  # built from these counts: the words are their first rows, no hashing needed
    else:
        current = pc.is_in(counts["token"], value_set=words).to_numpy(zero_copy_only=False)
    keep = choose_size(counts["train"].to_numpy(), cutoff)
    proposed = np.zeros(counts.num_rows, dtype=bool)
    proposed[:keep] = True
    entering = proposed & ~current
    leaving = current & ~proposed
    # A frozen vocabulary may hold words this corpus never saw; they leave with count 0.
    unseen_words: list[tuple[str, int]] = []
    if int(current.sum()) < len(words):
        unseen = pc.invert(pc.is_in(words, value_set=counts["token"]))
        unseen_words = [(token, 0) for token in words.filter(unseen).to_pylist()]
    return Answer(
        cutoff,
        figures(counts, current, start, len(words)),
        figures(counts, proposed, start, keep),
        _top(counts, entering, show),
        (_top(counts, leaving, show) + unseen_words)[:show],
        int(entering.sum()),
        int(leaving.sum()) + len(unseen_words),
    )


def build_cutoff(build: Path, args: argparse.Namespace) -> Cutoff:
    """The build's own cutoff with the command-line limits put in its place."""
    manifest = Path(Layout(str(build)).manifest)
    base = Cutoff()
    if manifest.exists():
        base = Cutoff.from_config(json.loads(manifest.read_text(encoding="utf-8"))["config"]["vocabulary"])
    given = vars(args)
    changes = {name: given[name] for name in ("min_count", "max_size", "coverage") if name in given}
    return replace(base, **changes)


def _limit(kind: type, low: float, high: float | None) -> Callable[[str], object]:
    """An argparse type: a number in [low, high], or 'off' for no limit."""

    def parse(text: str) -> object:
        if text == "off":
            return None
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a number or 'off', got {text!r}") from None
        if value < low or (high is not None and value > high):
            raise argparse.ArgumentTypeError(f"{text} is outside [{low}, {high if high is not None else '∞'}]")
        return value

    return parse


def format_answer(answer: Answer) -> str:
    """A plain-text table: current and proposed side by side, then the words that change."""
    cutoff = answer.cutoff
    limits = ", ".join(
        f"{name}={'off' if value is None else value}"
        for name, value in (("min-count", cutoff.min_count), ("max-size", cutoff.max_size), ("coverage", cutoff.coverage))
    )
    c, p = answer.current, answer.proposed
    lines = [
        f"cutoff: {limits}",
        f"{'':<16} {'current':>12} {'proposed':>12} {'change':>12}",
        f"{'ids (|V|)':<16} {c.ids:>12,} {p.ids:>12,} {p.ids - c.ids:>+12,}",
        f"{'words':<16} {c.words:>12,} {p.words:>12,} {p.words - c.words:>+12,}",
    ]
    for label, a, b in (
        ("train coverage", c.train_coverage, p.train_coverage),
        ("dev OOV rate", c.dev_oov_rate, p.dev_oov_rate),
        ("test OOV rate", c.test_oov_rate, p.test_oov_rate),
    ):
        lines.append(f"{label:<16} {a:>12.4%} {b:>12.4%} {(b - a) * 100:>+11.4f}pp")
    for title, total, top in (("entering", answer.entering_total, answer.entering), ("leaving", answer.leaving_total, answer.leaving)):
        shown = ", ".join(f"{token} ({count:,})" for token, count in top)
        lines.append(f"{title}: {total:,} words" + (f"; most frequent: {shown}" if shown else ""))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(
        prog="corpusmill cutoffs",
        description="What a different vocabulary cutoff would give, answered from a build's stored counts. "
        "Limits not given keep the build's value; 'off' removes a limit.",
    )
    parser.add_argument("build", type=Path, help="a build folder (holding vocabulary.tsv and stats/)")
    parser.add_argument("--min-count", type=_limit(int, 1, None), default=argparse.SUPPRESS, help="keep words seen at least N times in train")
    parser.add_argument("--max-size", type=_limit(int, 0, None), default=argparse.SUPPRESS, help="keep at most N words")
    parser.add_argument("--coverage", type=_limit(float, 0.0, 1.0), default=argparse.SUPPRESS, help="fewest words covering this share of train tokens")
    parser.add_argument("--show-changes", type=int, default=10, metavar="K", help="list the K most frequent words entering and leaving")
    parser.add_argument("--json", action="store_true", help="print the answer as JSON")
    args = parser.parse_args(argv)
    layout = Layout(str(args.build))
    counts_path, vocabulary_path = Path(layout.token_counts), Path(layout.vocabulary)
    for path in (counts_path, vocabulary_path):
        if not path.exists():
            raise SystemExit(f"corpusmill: {path}: not found; is {args.build} a finished build folder? Run the workflow first")
    vocabulary = WordList.read(vocabulary_path)
    # ParquetFile.read, unlike read_table, does not import pyarrow.dataset (and pandas): half the start-up time.
    answer = what_if(pq.ParquetFile(counts_path).read(), vocabulary, build_cutoff(args.build, args), max(args.show_changes, 0))
    print(json.dumps(answer.to_json(), indent=2, ensure_ascii=False) if args.json else format_answer(answer))


if __name__ == "__main__":
    main()
