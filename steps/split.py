"""Split: a document's train/dev/test split by a salted hash of its key, and the seeded order of
train documents inside their shard.

A document's split depends only on its key (by default its cleaned text) and the salt, so
adding documents never moves existing ones, and exact duplicates always land together. Its
`doc_hash` is an unseeded 64-bit hash of its id; train documents are ordered by a seeded mix
of it (`order_keys`), so that order does not depend on where the documents were read.
"""

from __future__ import annotations

import hashlib

import numpy as np

from .layout import SPLITS

_TWO_64 = float(1 << 64)


def fingerprint(text: str) -> bytes:
    """16-byte content hash of a cleaned document (exact-duplicate detection)."""
    return hashlib.blake2b(text.encode("utf-8"), digest_size=16).digest()


def split_position(key: bytes, salt: str) -> float:
    """A uniform number in [0, 1] drawn from the key and the salt (1.0 only for the largest
    hashes, where the float division rounds up). The salt is BLAKE2b's key, which holds at
    most 64 bytes: a longer salt is hashed to 64 bytes first, so every byte of it counts."""
    secret = salt.encode("utf-8")
    if len(secret) > 64:
        secret = hashlib.blake2b(secret, digest_size=64).digest()
    digest = hashlib.blake2b(key, digest_size=8, key=secret).digest()
    return int.from_bytes(digest, "big") / _TWO_64


def assign_split(key: bytes, salt: str, fractions: dict[str, float]) -> str:
    """'train', 'dev' or 'test' for a document key, by cumulative fractions in that order."""
    position = split_position(key, salt)
    bound = 0.0
    for name in SPLITS:
        bound += fractions[name]
        if position < bound:
            return name
    return next(name for name in reversed(SPLITS) if fractions[name] > 0)


def doc_hash(doc_id: str) -> int:
    """The unseeded 64-bit hash of a document id: the order of rows in a chunk table
    (steps.chunks) and the input of the train order (order_keys)."""
    return int.from_bytes(hashlib.blake2b(doc_id.encode("utf-8"), digest_size=8).digest(), "big")


def order_keys(doc_hashes: np.ndarray, seed: int) -> np.ndarray:
    """The order of train documents inside a batch of their chunk: a seeded 64-bit mix of each
    document's `doc_hash` (uint64 array), vectorized. The mix is splitmix64's finalizer, a
    bijection in which every input bit moves every output bit, so the order of a batch of
    consecutive row groups, whose hashes share a range, looks random and changes completely
    with the seed."""
    keys = doc_hashes.astype(np.uint64) ^ _mix(np.array([seed & ((1 << 64) - 1)], np.uint64))[0]
    return _mix(keys)


def _mix(values: np.ndarray) -> np.ndarray:
    """splitmix64's finalizer over a uint64 array (arithmetic mod 2**64)."""
    with np.errstate(over="ignore"):
        values = (values ^ (values >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        values = (values ^ (values >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return values ^ (values >> np.uint64(31))
