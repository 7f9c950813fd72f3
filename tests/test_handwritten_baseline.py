"""The hand-written baseline of the pipeline benchmark (bench/handwritten_baseline.py) computes what it claims.

Its output is checked against a plain-Python recount written here from the script's specification:
per-paragraph and per-sentence loops with `re`, an MD5 split, a `collections.Counter` vocabulary
and 4-gram windows built one sentence at a time.
"""

from __future__ import annotations

import hashlib
import importlib.util
import random
import re
import unicodedata
from collections import Counter
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

REPO = Path(__file__).resolve().parent.parent
_spec = importlib.util.spec_from_file_location("handwritten_baseline", REPO / "bench" / "handwritten_baseline.py")
baseline = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(baseline)

SPLITS = ("train", "dev", "test")
WORDS = "the a cat dog sat ran on under mat log and but quickly slowly red blue big small".split()


def recount_split(document: str) -> str:
    """train, dev or test by the first 8 bytes of the document's MD5 modulo 100 (90/5/5)."""
    bucket = int.from_bytes(hashlib.md5(document.encode("utf-8")).digest()[:8], "big") % 100
    return "train" if bucket < 90 else "dev" if bucket < 95 else "test"


def recount(folder: Path) -> dict:
    """Vocabulary, per-split (context, target) rows and duplicate count, one loop at a time."""
    seen: set[str] = set()
    duplicates = 0
    sentences: dict[str, list[list[str]]] = {split: [] for split in SPLITS}
    for path in sorted(folder.glob("*.txt")):
        text = unicodedata.normalize("NFC", path.read_text(encoding="utf-8"))
        for paragraph in re.split(r"\n\s*\n", text):
            paragraph = paragraph.strip()
            if not paragraph:
                continue
            if paragraph in seen:
                duplicates += 1
                continue
            seen.add(paragraph)
            for sentence in re.split(r"(?<=[.!?])\s+(?=[A-Z])", paragraph):
                sentences[recount_split(paragraph)].append(re.findall(r"\w+|[^\w\s]", sentence))
    counts = Counter(word for sentence in sentences["train"] for word in sentence)
    vocabulary = ["<pad>", "<unk>", "<s>", "</s>"] + sorted((w for w, n in counts.items() if n >= 2), key=lambda w: (-counts[w], w))
    index = {word: number for number, word in enumerate(vocabulary)}
    rows = {}
    for split in SPLITS:
        rows[split] = []
        for sentence in sentences[split]:
            sequence = [2, 2, 2] + [index.get(word, 1) for word in sentence] + [3]
            rows[split] += [(sequence[i : i + 3], sequence[i + 3]) for i in range(len(sentence) + 1)]
    return {"vocabulary": vocabulary, "rows": rows, "duplicates": duplicates}


def random_paragraph(rng: random.Random) -> str:
    """One to three sentences of random words, each capitalised and ended by `.`, `!` or `?`."""
    sentences = []
    for _ in range(rng.randint(1, 3)):
        words = [rng.choice(WORDS) for _ in range(rng.randint(1, 8))]
        sentences.append(" ".join(words).capitalize() + rng.choice(".!?"))
    return " ".join(sentences)


def check_against_recount(folder: Path, output: Path, id_type: pa.DataType) -> dict:
    figures = baseline.run_script(folder, output, workers=2)
    expected = recount(folder)
    assert (output / "vocab.txt").read_text(encoding="utf-8").splitlines() == expected["vocabulary"]
    assert figures["vocabulary_size"] == len(expected["vocabulary"])
    assert figures["duplicates"] == expected["duplicates"]
    for split in SPLITS:
        table = pq.read_table(output / f"{split}.parquet")
        assert table.schema.field("context").type == pa.list_(id_type, 3)
        assert table.schema.field("target").type == id_type
        got = list(zip(table["context"].to_pylist(), table["target"].to_pylist()))
        assert got == expected["rows"][split], split
        assert figures["rows"][split] == len(expected["rows"][split])
    return expected


def test_baseline_output_matches_a_plain_python_recount(tmp_path: Path) -> None:
    """Two files with duplicates inside and across files (one only after NFC), blank lines holding
    spaces, sentence ends not followed by a capital, and a train document whose words occur once,
    twice and three times: the same vocabulary (min count 2), rows in the same order and duplicate
    count as the recount, ids as uint16."""
    rng = random.Random(18)
    first = [random_paragraph(rng) for _ in range(120)]
    second = [random_paragraph(rng) for _ in range(120)]
    counted = next(d for d in (f"Kiwi{s} pear pear plum plum plum." for s in range(100)) if recount_split(d) == "train")
    first += ["Caf\u00e9 au lait. Mr. Smith ran to the caf\u00e9!", first[3], "e.g. this one stays whole. and so does this", counted]
    second += ["Cafe\u0301 au lait. Mr. Smith ran to the cafe\u0301!", first[10], "  Trailing spaces here. ", "\u00c9clair? Yes."]
    (tmp_path / "in").mkdir()
    (tmp_path / "in" / "a.txt").write_text("\n\n".join(first) + "\n", encoding="utf-8")
    (tmp_path / "in" / "b.txt").write_text("\n \t\n".join(second[:60]) + " \n\n\n" + "\n\n".join(second[60:]), encoding="utf-8")
    expected = check_against_recount(tmp_path / "in", tmp_path / "out", pa.uint16())
    assert expected["duplicates"] >= 3 and all(expected["rows"][split] for split in SPLITS)
    assert "pear" in expected["vocabulary"] and counted.split()[0] not in expected["vocabulary"]


def test_baseline_switches_ids_to_uint32_beyond_65536_vocabulary_entries(tmp_path: Path) -> None:
    """A train document holding 65,600 distinct words twice each: every id still matches the recount, as uint32."""
    words = " ".join(f"w{number}" for number in range(65_600))
    (tmp_path / "in").mkdir()
    document = next(d for d in (f"Salt{s} {words} {words}." for s in range(100)) if recount_split(d) == "train")
    (tmp_path / "in" / "a.txt").write_text(f"{document}\n\nShort one.\n", encoding="utf-8")
    (tmp_path / "in" / "b.txt").write_text("Another file.\n", encoding="utf-8")
    expected = check_against_recount(tmp_path / "in", tmp_path / "out", pa.uint32())
    assert len(expected["vocabulary"]) > 2**16
