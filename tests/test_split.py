"""Split: salted hash assignment of train/dev/test, its stability and fractions; the document
hash and the seeded order of train documents."""

from __future__ import annotations

import math
import random

import numpy as np

from corpusmill.accounting import Tally
from corpusmill.ingest import Document
from corpusmill.prepare import ChunkPreparer
from corpusmill.settings import resolve
from corpusmill.split import assign_split, doc_hash, fingerprint, order_keys, split_position

FRACTIONS = {"train": 0.8, "dev": 0.1, "test": 0.1}
# Shares that put many documents in every split, so a wrong key or salt shows quickly.
SPREAD = {"train": 0.6, "dev": 0.2, "test": 0.2}


def prepared_splits(documents: list[tuple[str, str]], **split: object) -> dict[str, str]:
    """doc_id → split of (doc_id, text) documents run through the prepare step's ChunkPreparer
    with the given split options over the defaults."""
    preparer = ChunkPreparer(resolve({"split": split}))
    stream = (Document(doc_id, "notes.txt", 40 * number, text) for number, (doc_id, text) in enumerate(documents))
    splits = {}
    for table in preparer.batches(stream, Tally()):
        splits.update(zip(table["doc_id"].to_pylist(), table["split"].to_pylist()))
    return splits


def test_another_salt_draws_an_independent_split():
    """Independent draws agree on a document's split with probability sum(p_i**2) = 0.66 for
    shares 0.8/0.1/0.1; over 4,000 documents the agreement lies in the binomial 99.9% interval
    (z = 3.29). A salt that changed nothing would agree on every document."""
    n, agree = 4000, 0
    for i in range(n):
        key = fingerprint(f"document {i}")
        agree += assign_split(key, "corpusmill-split-v1", FRACTIONS) == assign_split(key, "another salt", FRACTIONS)
    p = sum(f * f for f in FRACTIONS.values())
    assert abs(agree - n * p) <= 3.29 * math.sqrt(n * p * (1 - p)), agree


def test_salts_longer_than_a_blake2b_key_still_draw_different_splits():
    """BLAKE2b keys hold at most 64 bytes (RFC 7693); salts that differ only after their 64th
    byte must still draw different splits."""
    base = "s" * 64
    keys = [fingerprint(f"document {i}") for i in range(200)]
    first = [assign_split(key, base + "-one", FRACTIONS) for key in keys]
    assert first != [assign_split(key, base + "-two", FRACTIONS) for key in keys]
    assert [assign_split(key, base + "1", FRACTIONS) for key in keys] != [assign_split(key, base + "2", FRACTIONS) for key in keys]


def test_salts_up_to_64_bytes_key_blake2b_directly():
    """Splits drawn by earlier builds stay where they were: a salt of at most 64 bytes is the
    BLAKE2b key itself (hashlib's RFC 7693 implementation as the reference), 8-byte digest,
    big-endian, divided by 2**64."""
    import hashlib

    for salt in ("corpusmill-split-v1", "s" * 64, ""):
        for key in (b"", b"a document", fingerprint("x")):
            expected = int.from_bytes(hashlib.blake2b(key, digest_size=8, key=salt.encode()).digest(), "big") / 2**64
            assert split_position(key, salt) == expected


def test_the_prepare_step_assigns_each_document_by_its_cleaned_text_and_the_salt():
    """split.key = content: the key is the fingerprint of the cleaned text, so the same text
    under two ids, or with other whitespace, gets one split; assign_split with the configured
    salt is the reference."""
    texts = [f"Paragraph {i} tells of the harbour and its {i % 7} boats." for i in range(300)]
    documents = [(f"a.txt:{i}", t) for i, t in enumerate(texts)] + [(f"b.txt:{i}", "  " + t.replace(" ", "\t")) for i, t in enumerate(texts)]
    for salt in ("corpusmill-split-v1", "another salt"):
        splits = prepared_splits(documents, salt=salt, fractions=SPREAD)
        assert [splits[f"a.txt:{i}"] for i in range(300)] == [splits[f"b.txt:{i}"] for i in range(300)]
        assert [splits[f"a.txt:{i}"] for i in range(300)] == [assign_split(fingerprint(t), salt, SPREAD) for t in texts]
    assert prepared_splits(documents, fractions=SPREAD) != prepared_splits(documents, salt="another salt", fractions=SPREAD)


def test_the_prepare_step_assigns_by_document_id_when_asked():
    """split.key = id: the key is the UTF-8 document id; equal texts under different ids are
    assigned independently (assign_split as the reference)."""
    documents = [(f"f.txt:{40 * i}", "The same words in every document.") for i in range(300)]
    splits = prepared_splits(documents, key="id", fractions=SPREAD)
    assert splits == {doc_id: assign_split(doc_id.encode("utf-8"), "corpusmill-split-v1", SPREAD) for doc_id, _ in documents}
    assert len(set(splits.values())) == 3


def test_a_documents_split_does_not_depend_on_the_other_documents():
    """Adding documents never moves existing ones: each document prepared alone gets the split
    it gets among others, in any order."""
    documents = [(f"f.txt:{i}", f"Entry {i}: the lamp was lit at {i % 13} o'clock.") for i in range(200)]
    together = prepared_splits(documents, fractions=SPREAD)
    shuffled = prepared_splits(documents[::-1] + [("g.txt:0", "A new document about the quay.")], fractions=SPREAD)
    alone = {doc_id: prepared_splits([(doc_id, text)], fractions=SPREAD)[doc_id] for doc_id, text in documents[:40]}
    assert {k: shuffled[k] for k in together} == together
    assert alone == {k: together[k] for k in alone}
    assert len(set(together.values())) == 3


def test_a_position_at_the_top_of_the_range_goes_to_the_last_split_with_a_share(monkeypatch):
    """Eight hash bytes divided by 2**64 in floating point round up to exactly 1.0 for the
    largest values, and shares like 0.7 + 0.2 + 0.1 add up to just under 1: such a position
    falls past every bound and must go to the last split with a share, never an empty one."""
    from corpusmill import split

    assert split_position(b"k", "s") < 1.0 and (2**64 - 1) / float(2**64) == 1.0
    monkeypatch.setattr(split, "split_position", lambda key, salt: 1.0)
    assert assign_split(b"k", "s", {"train": 0.7, "dev": 0.2, "test": 0.1}) == "test"
    assert assign_split(b"k", "s", {"train": 0.8, "dev": 0.2, "test": 0.0}) == "dev"
    assert assign_split(b"k", "s", {"train": 1.0, "dev": 0.0, "test": 0.0}) == "train"


def test_cumulative_bounds_put_positions_below_a_bound_in_its_split(monkeypatch):
    """Shares 0.8/0.1/0.1: positions in [0, 0.8) are train, [0.8, 0.9) dev, [0.9, 1) test
    (SPLITS order, half-open intervals)."""
    from corpusmill import split

    for position, expected in ((0.0, "train"), (0.7999, "train"), (0.8, "dev"), (0.8999, "dev"), (0.9, "test"), (0.9999, "test")):
        monkeypatch.setattr(split, "split_position", lambda key, salt, p=position: p)
        assert assign_split(b"k", "s", FRACTIONS) == expected, position


def test_fractions_fall_inside_the_binomial_interval():
    """10,000 synthetic documents; each split count lies in the binomial 99.9% interval
    (normal approximation, z = 3.29 for two-sided 99.9%)."""
    n = 10_000
    counts = {"train": 0, "dev": 0, "test": 0}
    for i in range(n):
        counts[assign_split(fingerprint(f"synthetic document {i}"), "corpusmill-split-v1", FRACTIONS)] += 1
    for split, p in FRACTIONS.items():
        half_width = 3.29 * math.sqrt(n * p * (1 - p))
        assert abs(counts[split] - n * p) <= half_width, (split, counts[split])


def test_zero_fractions_are_never_assigned():
    only_train = {"train": 1.0, "dev": 0.0, "test": 0.0}
    assert {assign_split(fingerprint(str(i)), "s", only_train) for i in range(200)} == {"train"}


def test_doc_hash_is_blake2b_of_the_id():
    """Reference: hashlib's BLAKE2b (RFC 7693), 8-byte digest, big-endian."""
    import hashlib

    assert doc_hash("notes.txt:0") == int.from_bytes(hashlib.blake2b(b"notes.txt:0", digest_size=8).digest(), "big")


def reference_mix(value: int) -> int:
    """splitmix64's output function in plain integer arithmetic (Steele, Lea & Flood, 2014)."""
    mask = (1 << 64) - 1
    value = ((value ^ (value >> 30)) * 0xBF58476D1CE4E5B9) & mask
    value = ((value ^ (value >> 27)) * 0x94D049BB133111EB) & mask
    return value ^ (value >> 31)


def test_order_keys_are_a_seeded_splitmix64_mix_of_the_doc_hash():
    """Reference: splitmix64 seeded with 0 first returns 0xE220A8397B1DCDAF (the published
    reference output, value from memory), and a plain-integer restatement of the mix."""
    assert reference_mix(0x9E3779B97F4A7C15) == 0xE220A8397B1DCDAF
    rng = random.Random(5)
    hashes = [0, 1, (1 << 64) - 1] + [rng.randrange(1 << 64) for _ in range(500)]
    for seed in (0, 1, 20240601):
        keys = order_keys(np.array(hashes, dtype=np.uint64), seed)
        assert keys.dtype == np.uint64
        assert keys.tolist() == [reference_mix(h ^ reference_mix(seed)) for h in hashes]
    assert len(set(order_keys(np.array(hashes, dtype=np.uint64), 3).tolist())) == len(set(hashes)), "a bijection"
    assert order_keys(np.array(hashes, np.uint64), 1).tolist() != order_keys(np.array(hashes, np.uint64), 2).tolist()


def test_order_seeds_of_any_size_are_taken_modulo_2_to_the_64():
    """shards.seed has no upper bound in the schema; the mix takes a seed modulo 2**64 (Python's
    & on a negative int is two's complement), so 2**64 + 5 and 5, or -1 and 2**64 - 1, order alike."""
    hashes = np.array([0, 1, 12345, (1 << 64) - 1], np.uint64)
    assert order_keys(hashes, -1).tolist() == order_keys(hashes, (1 << 64) - 1).tolist()
    assert order_keys(hashes, (1 << 64) + 5).tolist() == order_keys(hashes, 5).tolist() == [reference_mix(int(h) ^ reference_mix(5)) for h in hashes]
