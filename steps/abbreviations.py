"""Abbreviations learned from the corpus (segment.learn_abbreviations): the words after which a
period does not end a sentence, found by the type-based method of Kiss & Strunk (2006) in the
cleaned text of the start of each input file.

Rule `abbreviations` writes them one a line to interim/abbreviations.txt; every prepare job then
reads the list, so learning makes every chunk depend on the whole corpus.
"""

from __future__ import annotations

import json
import math
from collections import Counter
from collections.abc import Iterable
from pathlib import Path

import regex

from . import job
from .accounting import Tally
from .clean import CleanOptions, clean_text
from .ingest import CorpusError, ReadOptions, plan_chunks, read_documents
from .storage import write_text

RULE = "abbreviations"
# Of corpus, what reading a file takes.
SECTIONS = (
    "clean", "corpus.root", "corpus.text_unit", "corpus.jsonl_text_field", "corpus.jsonl_id_field", "corpus.repeated_ids",
    "corpus.bad_records", "corpus.invalid_utf8", "corpus.max_document_bytes", "corpus.oversize", "corpus.max_decompressed_mb",
)  # fmt: skip
SAMPLE_BYTES = 16 << 20  # text read from the start of each file
_FLAGS = regex.V1

# Words of the abbreviation learner: letters/digits with inner periods, and an optional final
# period directly attached ("e.g." → ("e.g", ".")). Possessive: a word is always taken whole.
_WORD_WITH_INNER_PERIODS = r"\w++(?:\.\w++)*+"
_LEARNER_WORD = regex.compile(rf"({_WORD_WITH_INNER_PERIODS})(\.?)", _FLAGS)
_LETTERS_AND_PERIODS = regex.compile(r"[^\W\d_]++(?:\.[^\W\d_]++)*+", _FLAGS)
_PERIOD_AFTER_ABBREVIATION = 0.99  # Kiss & Strunk's fixed P(period | abbreviation)
# A word with a final period, then the first character of the next word, or only blanks to the
# end. Each word is examined once: from where the last match ended (\G), the loop steps over
# whole words that are not such a word, so a match is never tried again from inside a word
# (a search from every position of "a.a.a…a" took time worse than quadratic in its length).
_PERIOD_THEN_WORD = regex.compile(
    rf"\G(?:\W*+{_WORD_WITH_INNER_PERIODS}(?!\.(?:\s++\w|\s*+$)))*+"
    rf"\W*+({_WORD_WITH_INNER_PERIODS})\.(?:\s++(\w)|\s*+$)",
    _FLAGS,
)
#: Share of a candidate's "w. x" occurrences where x is lowercase or a digit (a sentence would
#: start with a capital) below which it is taken for a sentence end, not an abbreviation.
_MIN_CONTINUED_SHARE = 1 / 3


def _log(x: float) -> float:
    return math.log(x) if x > 0 else -math.inf


def _term(count: int, log_p: float) -> float:
    return count * log_p if count else 0.0


def learn_abbreviations(
    texts: Iterable[str],
    *,
    min_count: int = 3,
    threshold: float = 0.3,
    max_types: int = 1_000_000,
) -> frozenset[str]:
    """Abbreviations found by the type-based method of Kiss & Strunk (2006, "Punkt").

    Why: a corpus's own abbreviations (domain jargon, other languages) are not in any fixed
    list. Each lowercased word type w seen with a final period at least ``min_count`` times
    (letters with optional inner periods) is scored
    ``log λ · exp(-len) · (inner_periods + 1) · len ** -C(w, no period)``, where ``len``
    counts w's non-period characters, ``log λ`` is Dunning's log-likelihood ratio of
    P(period | w) = 0.99 against P(period | w) = C(period) / N over all N word tokens, and
    the last factor punishes occurrences without a period; w is kept when the score reaches
    ``threshold``. On top of that score, an orthographic check of our own: at least a third of
    the times ``w.`` is followed by a word or ends the text, that word starts in lowercase or
    with a digit (otherwise the period looks like a sentence end: a template corpus ends many sentences with
    the same word). Memory holds counts only: past ``max_types`` distinct entries the rarest
    are dropped, as little as needed to halve the table. Returns words without final period.
    """
    counts: Counter[tuple[str, str]] = Counter()
    followed: Counter[str] = Counter()
    continued: Counter[str] = Counter()
    tokens = periods = 0
    for text in texts:
        for word, after in _PERIOD_THEN_WORD.findall(text):
            word = word.lower()
            followed[word] += 1
            continued[word] += after.islower() or after.isdigit()
        local = Counter(_LEARNER_WORD.findall(text.lower()))
        tokens += local.total()
        periods += sum(count for (_, dot), count in local.items() if dot)
        counts.update(local)
        if len(counts) > max_types:
            _prune(counts, max_types // 2)
    if not periods:
        return frozenset()
    log_p = _log(periods / tokens)
    log_not_p = _log(1 - periods / tokens)
    log_q = math.log(_PERIOD_AFTER_ABBREVIATION)
    log_not_q = math.log(1 - _PERIOD_AFTER_ABBREVIATION)
    found = set()
    for (word, dot), with_period in counts.items():
        if not dot or with_period < min_count or not _LETTERS_AND_PERIODS.fullmatch(word):
            continue
        if followed[word] and continued[word] < _MIN_CONTINUED_SHARE * followed[word]:
            continue
        without_period = counts.get((word, ""), 0)
        null = _term(with_period, log_p) + _term(without_period, log_not_p)
        alternative = _term(with_period, log_q) + _term(without_period, log_not_q)
        log_lambda = -2.0 * (null - alternative)
        length = len(word) - word.count(".")
        score = log_lambda * math.exp(-length) * (word.count(".") + 1) * length**-without_period
        if score >= threshold:
            found.add(word)
    return frozenset(found)


def _prune(counts: Counter[tuple[str, str]], target: int) -> None:
    """Drop every entry whose count is at most the lowest cut-off that leaves at most `target`.

    The cut-off comes from a tally of how many entries have each count, so the table is walked
    twice whatever the counts are (raising a cut-off by one per walk took as many walks as the
    cut-off's value).
    """
    if len(counts) <= target:
        return
    remaining = len(counts)
    for cutoff, entries in sorted(Counter(counts.values()).items()):  # noqa: B007 (used after the loop)
        remaining -= entries
        if remaining <= target:
            break
    for key in [key for key, count in counts.items() if count <= cutoff]:
        del counts[key]


def learned_abbreviations(root: str, sources: list[str], config: dict, sample_bytes: int) -> frozenset[str]:
    """Abbreviations learned (learn_abbreviations) from the cleaned text of
    at most `sample_bytes` of documents from the start of each input file."""
    clean = CleanOptions.from_config(config["clean"])
    read = ReadOptions.from_config(config["corpus"])

    def texts():
        for source in sources:
            chunk = plan_chunks(root, [source], 1 << 62, config["corpus"]["text_unit"])[0]
            taken = 0
            for document in read_documents(root, chunk, 1 << 62, read, Tally()):
                yield clean_text(document.text, clean)
                taken += len(document.text)
                if taken >= sample_bytes:
                    break

    return learn_abbreviations(texts())


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Learn abbreviations from the corpus (segment.learn_abbreviations).")
    plans = [json.loads(Path(run.layout.chunk_plan(chunk)).read_text(encoding="utf-8")) for chunk in run.chunks()]
    sources = sorted({name for plan in plans for name, _, _ in plan["files"]})
    try:
        found = learned_abbreviations(run.options["corpus"]["root"], sources, run.options, SAMPLE_BYTES)
    except CorpusError as error:
        raise SystemExit(f"corpusmill: {error}") from None
    write_text(run.layout.abbreviations, "".join(f"{word}\n" for word in sorted(found)))
    print(f"{len(found)} abbreviations learned")


if __name__ == "__main__":
    main()
