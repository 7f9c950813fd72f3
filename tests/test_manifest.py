"""Manifest accounting: the chunk tallies added up, duplicates moved from kept to dropped, and the
identity read + pieces_added = kept + sum(dropped).

Outside reference: collections.Counter sums of the tally fields, written out per test.
"""

from __future__ import annotations

from collections import Counter

from steps.manifest import accounting


def tally(read: int, kept: int, dropped: dict[str, int], pieces_added: int = 0, truncated: int = 0, replaced: int = 0) -> dict:
    """One chunk's tally as the prepare step writes it (steps.ingest.Tally.as_dict)."""
    return {"read": read, "pieces_added": pieces_added, "truncated": truncated, "replaced_sequences": replaced, "kept": kept, "dropped": dropped}


TALLIES = [
    tally(10, 6, {"too_short": 3, "empty": 1}, truncated=1, replaced=2),
    tally(1, 4, {}, pieces_added=3),  # one oversize document split into four pieces
    tally(7, 6, {"few_letters": 1, "empty": 1}, pieces_added=1, truncated=2, replaced=5),
]


def test_every_figure_is_the_sum_over_the_chunk_tallies():
    """A Counter over the tallies' numeric fields and one over their drop reasons."""
    fields = Counter()
    reasons = Counter()
    for figures in TALLIES:
        fields.update({k: v for k, v in figures.items() if k != "dropped"})
        reasons.update(figures["dropped"])
    result = accounting(TALLIES, duplicates=0)
    assert {k: result[k] for k in ("read", "pieces_added", "kept", "truncated", "replaced_sequences")} == dict(fields)
    assert result["dropped"] == dict(reasons)
    assert (result["read"], result["pieces_added"], result["kept"]) == (18, 4, 16)


def test_pieces_added_by_splitting_documents_keep_the_identity_balanced():
    """read + pieces_added = kept + sum(dropped): 18 + 4 = 16 + 6 here; without the pieces the
    split documents' extra rows would be unaccounted for."""
    result = accounting(TALLIES, duplicates=0)
    assert result["read"] + result["pieces_added"] == result["kept"] + sum(result["dropped"].values()) == 22
    assert result["balanced"] is True
    assert accounting([tally(1, 4, {}, pieces_added=3)], 0)["balanced"] is True
    assert accounting([tally(1, 4, {}, pieces_added=2)], 0)["balanced"] is False


def test_removed_duplicates_move_from_kept_to_dropped():
    """The deduplication step's count: kept loses them, dropped gains a "duplicate" reason."""
    result = accounting(TALLIES, duplicates=4)
    assert result["kept"] == 12 and result["dropped"]["duplicate"] == 4
    assert result["balanced"] is True
    assert "duplicate" not in accounting(TALLIES, duplicates=0)["dropped"]
    one = accounting([tally(3, 3, {}), tally(2, 2, {})], duplicates=1)
    assert (one["kept"], one["dropped"]) == (4, {"duplicate": 1})


def test_a_lost_document_shows_as_unbalanced():
    """A tally that read a document it neither kept nor dropped breaks the identity."""
    assert accounting([tally(5, 3, {"empty": 1})], duplicates=0)["balanced"] is False
    assert accounting([tally(5, 3, {"empty": 2})], duplicates=0)["balanced"] is True


def test_drop_reasons_are_listed_in_name_order():
    """Deterministic manifest bytes: reasons sorted by name whatever order the tallies give."""
    result = accounting([tally(3, 0, {"too_short": 1, "empty": 1}), tally(2, 0, {"bad_json": 1, "empty": 1})], duplicates=1)
    assert list(result["dropped"]) == ["bad_json", "duplicate", "empty", "too_short"]
    assert result["dropped"] == {"bad_json": 1, "duplicate": 1, "empty": 2, "too_short": 1}


def test_no_tallies_give_an_empty_balanced_accounting():
    """An empty corpus: every figure zero, nothing dropped, balanced."""
    assert accounting([], duplicates=0) == {
        "read": 0, "pieces_added": 0, "kept": 0, "dropped": {}, "truncated": 0, "replaced_sequences": 0, "balanced": True,
    }
