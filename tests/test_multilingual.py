"""Real multilingual text: Debian's fortunes in German, Russian, Chinese and Esperanto.

Source: Debian packages fortunes-de, fortunes-ru, fortunes-zh, fortunes-eo (records between `%`
lines, each one document). The pipeline runs on them with the default segmenters; tokenization
is lossless up to whitespace and the statistics are sane.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from conftest import require_file, run_workflow
from corpusmill.clean import CleanOptions, clean_text
from corpusmill.segment import Segmenter, is_lossless
from corpusmill.settings import resolve

FORTUNES = Path("/usr/share/games/fortunes")
LANGUAGES = {
    "de": ("fortunes-de", ["de/witze", "de/zitate", "de/sprueche", "de/anekdoten", "de/sprichworte"]),
    "ru": ("fortunes-ru", ["ru/2001.03", "ru/2001.04", "ru/2001.05", "ru/2001.06", "ru/2001.07", "ru/2001.08"]),
    "zh": ("fortunes-zh", ["chinese", "tang300"]),
    "eo": ("fortunes-eo", ["eo/proverbaro"]),
}
RECORDS_PER_LANGUAGE = 1500


def records(language: str) -> list[str]:
    package, files = LANGUAGES[language]
    found = []
    for name in files:
        path = FORTUNES / name
        if not path.exists() and name == files[0]:
            require_file(path, package)
        if path.exists():
            found += [r.strip("\n") for r in path.read_text(encoding="utf-8").split("\n%\n") if r.strip()]
    return found[:RECORDS_PER_LANGUAGE]


@pytest.fixture(scope="module")
def fortunes_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    directory = tmp_path_factory.mktemp("fortunes")
    corpus = directory / "corpus"
    corpus.mkdir()
    for language in LANGUAGES:
        lines = [json.dumps({"text": text}, ensure_ascii=False) for text in records(language)]
        (corpus / f"{language}.jsonl").write_text("\n".join(lines) + "\n", encoding="utf-8")
    run_workflow(directory, {"corpus": {"root": str(corpus), "jsonl_id_field": None}})
    return directory / "build"


@pytest.mark.parametrize("language", sorted(LANGUAGES))
def test_tokenization_is_lossless_on_real_text(language: str):
    config = resolve({})
    segmenter = Segmenter.from_config(config["segment"])
    options = CleanOptions.from_config(config["clean"])
    for text in records(language):
        cleaned = clean_text(text, options)
        for sentence in segmenter.sentences(cleaned):
            assert is_lossless(sentence, segmenter.tokens(sentence)), sentence


@pytest.mark.parametrize("language", sorted(LANGUAGES))
def test_statistics_are_sane_per_language(fortunes_build: Path, language: str):
    """Tolerances: written sentences average roughly 10-25 words (common practice); fortunes are
    short quips, so 3-40 tokens per sentence for the alphabetic scripts. Chinese yields one token
    per ideograph (UAX #29), about 1.5-2 characters per word, so 5-80. OOV rates: a min-count-2
    vocabulary over ~1,500 short records of one language leaves most held-out tokens known but a
    long tail of rare inflected forms (Russian inflects richly: about 20% of its train tokens
    occur once at this size). Bounds, common practice for corpora of ~50k tokens per language:
    train OOV under 30%, dev OOV under 40%."""
    manifest = json.loads((fortunes_build / "manifest.json").read_text())
    coverage = json.loads((fortunes_build / "stats" / "coverage.json").read_text())
    assert manifest["accounting"]["balanced"]
    source = coverage["sources"][f"{language}.jsonl"]
    low, high = (5, 80) if language == "zh" else (3, 40)
    train = manifest["splits"]["train"]
    assert low <= train["tokens"] / train["sentences"] <= 80
    assert source["train"]["tokens"] > 1000
    assert source["train"]["unknown_rate"] < 0.30
    assert source["dev"]["tokens"] == 0 or source["dev"]["unknown_rate"] < 0.40
    sentences = _sentences_per_language(language)
    per_sentence = sum(sentences) / len(sentences)
    assert low <= per_sentence <= high, per_sentence


def _sentences_per_language(language: str) -> list[int]:
    config = resolve({})
    segmenter = Segmenter.from_config(config["segment"])
    options = CleanOptions.from_config(config["clean"])
    return [len(tokens) for text in records(language) for tokens in segmenter.segment(clean_text(text, options))]
