"""Copies of a text that read as new text: the benchmark's way of growing its corpus tenfold.

Copy k (1 to 25) gives a share RENAMED_SHARE of the word types (letter runs, picked by a hash of
k and the case-folded word) an ending of its own, `zq` and the k-th letter, upper case after an
upper-case word. Every occurrence of a picked word changes alike, so a copy keeps the text's
sentences, word frequencies and shapes, while a document of one copy shares few word n-grams
with the same document in another copy (a run of n words survives when none of its words was
picked), and each copy adds new word types as new text does.
"""

from __future__ import annotations

import re
import zlib

RENAMED_SHARE = 0.3
LETTER_RUN = re.compile(r"[^\W\d_]+")


def ending(copy: int) -> str:
    """The letters copy k appends to the words it picks."""
    if not 0 < copy < 26:
        raise ValueError(f"copy {copy}: renamed copies run from 1 to 25")
    return "zq" + chr(ord("a") + copy)


def picked(word: str, copy: int) -> bool:
    """Whether copy k renames this word (every case of it alike)."""
    return zlib.crc32(f"{copy}\0{word.casefold()}".encode()) < int(RENAMED_SHARE * 2**32)


def renamed(text: str, copy: int) -> str:
    """Copy k of the text: each picked letter run followed by the copy's ending."""
    own = ending(copy)
    seen: dict[str, str] = {}

    def rename(match: re.Match[str]) -> str:
        word = match.group()
        if word not in seen:
            seen[word] = word + (own.upper() if word.isupper() else own) if picked(word, copy) else word
        return seen[word]

    return LETTER_RUN.sub(rename, text)
