"""The per-document part of `corpusmill compare`: time and peak memory of matching the kept
documents of one group of chunks (the worst case: one large file), old against new.

The tables are synthetic identity columns (steps.chunks.IDENTITY_SCHEMA) of N documents of one
file with path:offset ids; the new side has 1% of the documents edited (same offset, new
content hash) and, from the middle of the file on, every offset shifted by 17 bytes (an edit
that lengthened one paragraph): half the ids are gone and come back as moved documents, the
case that takes the slow path. Figures print as JSON lines; run from the repository root:

    python bench/compare.py --documents 100000 1000000
"""

from __future__ import annotations

import argparse
import hashlib
import json
import resource
import sys
import time
from pathlib import Path

import numpy as np
import pyarrow as pa

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from steps.chunks import IDENTITY_SCHEMA
from steps.compare import DocumentChanges, SplitSettings
from steps.split import assign_split

SETTINGS = SplitSettings("content", "corpusmill-split-v1", (("dev", 0.05), ("test", 0.05), ("train", 0.9)))


def side(offsets: np.ndarray, prints: list[bytes]) -> pa.Table:
    ids = [f"big.txt:{offset}" for offset in offsets.tolist()]
    splits = [assign_split(p, SETTINGS.salt, dict(SETTINGS.fractions)) for p in prints]
    columns = [pa.array(ids), pa.array(["big.txt"] * len(ids)), pa.array(offsets), pa.array(splits), pa.array(prints, pa.binary(16))]
    return pa.Table.from_arrays(columns, schema=IDENTITY_SCHEMA)


def run(documents: int) -> dict:
    rng = np.random.default_rng(documents)
    offsets = np.cumsum(rng.integers(200, 2000, documents))
    prints = [hashlib.blake2b(str(n).encode(), digest_size=16).digest() for n in range(documents)]
    edited = list(prints)
    for n in rng.choice(documents, documents // 100, replace=False).tolist():
        edited[n] = hashlib.blake2b(f"edited {n}".encode(), digest_size=16).digest()
    shifted = offsets.copy()
    shifted[documents // 2 :] += 17
    old, new = side(offsets, prints), side(shifted, edited)
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    start = time.perf_counter()
    changes = DocumentChanges(frozenset({"big.txt"}), SETTINGS, SETTINGS)
    changes.add_group(old, new)
    report = changes.to_json()
    seconds = time.perf_counter() - start
    return {
        "documents": documents,
        "seconds": round(seconds, 2),
        "microseconds_per_document": round(seconds / documents * 1e6, 2),
        "peak_rss_mib": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024),
        "peak_rss_before_comparing_mib": round(before / 1024),
        "totals": report["totals"],
        "split_changes": report["split_changes"]["total"],
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--documents", type=int, nargs="+", default=[100_000, 1_000_000])
    for documents in parser.parse_args().documents:
        print(json.dumps(run(documents)), flush=True)


if __name__ == "__main__":
    main()
