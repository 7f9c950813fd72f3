"""Near-duplicates: words and hashes by their documented definitions, MinHash against the
datasketch library and exact Jaccard, banding against its S-curve, clusters against brute force,
real copies among Debian's fortunes, and the policies' growth guarantee."""

from __future__ import annotations

import hashlib
import itertools
import math
import random
import re

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pytest
import regex
from hypothesis import given
from hypothesis import strategies as st

from corpusmill.near_duplicates import (
    EMPTY,
    MERSENNE,
    RUN_BASE,
    MinHashOptions,
    UnionFind,
    anchor_ranks,
    band_keys,
    cluster,
    cluster_anchors,
    detection_probability,
    document_words,
    drop_policy,
    estimated_jaccard,
    run_hashes,
    same_split_policy,
    signature_digests,
    signatures,
    verification,
)
from corpusmill.segment import Segmenter
from corpusmill.settings import resolve
from corpusmill.split import assign_split, fingerprint
from tests.conftest import require_file
from tests.test_laws import ENGLISH, FORTUNES

OPTIONS = MinHashOptions()
M64 = (1 << 64) - 1
SEPARATOR = regex.compile(r"[\s\p{Z}]+")
NOT_WORD = regex.compile(r"[^\p{L}\p{M}\p{N}]+")
SPREAD = {"train": 0.6, "dev": 0.2, "test": 0.2}


# --- plain-Python references of the documented definitions -----------------------------------


def reference_words(strings: list[str]) -> list[str]:
    """The documented normalisation: strings joined by spaces, lowercased, split at whitespace,
    characters other than letters, marks and numbers deleted."""
    text = " ".join(strings).lower()
    return [word for chunk in SEPARATOR.split(text) if (word := NOT_WORD.sub("", chunk))]


def reference_mix(value: int) -> int:
    value ^= value >> 30
    value = (value * 0xBF58476D1CE4E5B9) & M64
    value ^= value >> 27
    value = (value * 0x94D049BB133111EB) & M64
    return value ^ (value >> 31)


def reference_run(symbols: list[int]) -> int:
    return reference_mix((sum(s * pow(RUN_BASE, j, 1 << 64) for j, s in enumerate(symbols)) & M64) ^ len(symbols))


def reference_runs(words: list[str], length: int) -> list[int]:
    hashes = [reference_run(list(word.encode("utf-8"))) for word in words]
    if len(hashes) < length:
        return [reference_run(hashes)] if hashes else []
    return [reference_run(hashes[i : i + length]) for i in range(len(hashes) - length + 1)]


def shingle_set(words: list[str], length: int = OPTIONS.shingle) -> set[tuple[str, ...]]:
    if len(words) < length:
        return {tuple(words)} if words else set()
    return {tuple(words[i : i + length]) for i in range(len(words) - length + 1)}


def jaccard(first: set, second: set) -> float:
    return len(first & second) / len(first | second) if first | second else 1.0


def word_lists(documents: list[list[str]]) -> pa.Array:
    return pa.array(documents, pa.list_(pa.string()))


def minhash(documents: list[list[str]]) -> np.ndarray:
    return signatures(document_words(word_lists(documents)))


# --- synthetic near-duplicates -----------------------------------------------------------------


def vocabulary(rng: random.Random, size: int = 5000) -> list[str]:
    letters = "abcdefghijklmnopqrstuvwxyz"
    return sorted({"".join(rng.choice(letters) for _ in range(rng.randint(3, 9))) for _ in range(size)})


def edited(words: list[str], rate: float, rng: random.Random, vocab: list[str]) -> list[str]:
    """A copy with each word edited with probability `rate` (substituted, deleted, another word
    inserted, or one letter changed), then changes that the normalisation undoes: random case,
    punctuation around and inside words, and spacing."""
    out: list[str] = []
    for word in words:
        if rng.random() < rate:
            kind = rng.randrange(4)
            if kind == 0:
                out.append(rng.choice(vocab))
            elif kind == 2:
                out += [word, rng.choice(vocab)]
            elif kind == 3:
                at = rng.randrange(len(word))
                out.append(word[:at] + rng.choice("qxzj") + word[at + 1 :])
            continue
        out.append(word)
    cosmetic = []
    for word in out:
        word = rng.choice([word, word.upper(), word.capitalize()])
        if rng.random() < 0.1:
            word = word[:1] + rng.choice("'-.") + word[1:]
        if rng.random() < 0.15:
            word += rng.choice([",", ".", ";", " —", " ’", "!"])
        cosmetic.append(word + rng.choice([" ", "  ", "\n", " \u00a0"]))
    return ["".join(cosmetic)]


def pair_corpus(pairs: int, seed: int, rates: tuple[float, float] = (0.0, 0.12)) -> tuple[list[list[str]], list[float]]:
    """2 * pairs documents, document 2i and 2i + 1 a base text and an edited copy at an edit
    rate drawn from `rates`, and the exact Jaccard of each pair's shingle sets."""
    rng = random.Random(seed)
    vocab = vocabulary(rng)
    documents, similarities = [], []
    for _ in range(pairs):
        base = [rng.choice(vocab) for _ in range(rng.randint(60, 200))]
        copy = edited(base, rng.uniform(*rates), rng, vocab)
        documents += [[" ".join(base)], copy]
        similarities.append(jaccard(shingle_set(reference_words([" ".join(base)])), shingle_set(reference_words(copy))))
    return documents, similarities


# --- words and hashes ----------------------------------------------------------------------------


TEXT = st.text(st.characters(exclude_categories=("Cs",)), max_size=60)


@given(documents=st.lists(st.lists(TEXT, max_size=6), max_size=6))
def test_words_and_their_hashes_follow_the_documented_definition(documents: list[list[str]]) -> None:
    """Every word hash equals the documented polynomial over the UTF-8 bytes of the words found
    by a plain `regex` normalisation (lowercase, split at whitespace, delete the rest), documents
    in order. Lowercasing is Arrow's; characters that Python lowercases differently (U+0130 and
    letters newer than Python's Unicode tables) are left out."""
    for strings in documents:
        for string in strings:
            if pc.utf8_lower(pa.array([string]))[0].as_py() != string.lower():
                return
    found = document_words(pa.array(documents, pa.list_(pa.string())))
    for number, strings in enumerate(documents):
        expected = [reference_run(list(word.encode("utf-8"))) for word in reference_words(strings)]
        assert found.hashes[found.starts[number] : found.starts[number + 1]].tolist() == expected


def test_texts_sentences_and_token_lists_give_the_same_words() -> None:
    """Copies differing only in case, punctuation or spacing, given as one text, as sentences or
    as sentences of tokens, have the same word hashes."""
    text = "Don't STOP, now!  The U.S.\u00a0e-mail\tarrived.\n\nÉté — déjà vu?"
    as_text = document_words(pa.array([text, "dont stop now the us email arrived été déjà vu"]))
    as_sentences = document_words(pa.array([["Don't STOP, now!", "The U.S.\u00a0e-mail\tarrived.", "Été — déjà vu?"]]))
    segmenter = Segmenter.from_config(resolve({})["segment"])
    as_tokens = document_words(pa.array([segmenter.segment(text)], pa.list_(pa.list_(pa.string()))))
    words = as_text.hashes[: as_text.starts[1]]
    assert words.tolist() == as_text.hashes[as_text.starts[1] :].tolist() == as_sentences.hashes.tolist() == as_tokens.hashes.tolist()
    assert len(words) == 10


def test_long_batches_are_cut_at_string_ends_without_changing_words(monkeypatch: pytest.MonkeyPatch) -> None:
    """Words never span the slices the bytes are handled in: a tiny slice gives the same words."""
    rng = random.Random(3)
    vocab = vocabulary(rng, 300)
    documents = [[" ".join(rng.choice(vocab) for _ in range(rng.randint(0, 30))) for _ in range(rng.randint(0, 4))] for _ in range(50)]
    whole = document_words(pa.array(documents, pa.list_(pa.string())))
    monkeypatch.setattr("steps.near_duplicates.SLICE_BYTES", 40)
    sliced = document_words(pa.array(documents, pa.list_(pa.string())))
    assert whole.hashes.tolist() == sliced.hashes.tolist() and whole.starts.tolist() == sliced.starts.tolist()
    assert len(whole.hashes) > 500


@given(lengths=st.lists(st.integers(0, 12), max_size=8), length=st.integers(1, 6))
def test_run_hashes_follow_the_documented_polynomial(lengths: list[int], length: int) -> None:
    """Each document's runs: every window of `length` words, or one run of all its words when
    shorter, or none without words; hashed by the documented polynomial (Python integers)."""
    words = [[f"w{(7 * d + i) % 5}" for i in range(n)] for d, n in enumerate(lengths)]
    found, starts = run_hashes(document_words(word_lists(words)), length)
    for number, document in enumerate(words):
        assert found[starts[number] : starts[number + 1]].tolist() == reference_runs(document, length)


def test_signature_slots_are_least_universal_hashes_modulo_the_mersenne_prime() -> None:
    """Slot i is min over shingles of (a_i * x + b_i) mod (2**61 - 1), x the top 32 bits of the
    shingle hash, recomputed with Python integers; a document without words is EMPTY."""
    rng = random.Random(5)
    vocab = vocabulary(rng, 200)
    documents = [[" ".join(rng.choice(vocab) for _ in range(n))] for n in (0, 1, 4, 5, 6, 40, 300)]
    found = minhash(documents)
    a, b = OPTIONS.permutations()
    for number, document in enumerate(documents):
        xs = [h >> 32 for h in reference_runs(reference_words(document), OPTIONS.shingle)]
        expected = [min(((int(ai) * x + int(bi)) % MERSENNE for x in xs), default=int(EMPTY)) for ai, bi in zip(a, b)]
        assert found[number].tolist() == expected
    assert (a % (1 << 32) >= 1).all() and (a % (1 << 32) < (1 << 31)).all() and (a < (1 << 61)).all() and (b < MERSENNE).all()


# --- MinHash against outside references -----------------------------------------------------------


def test_minhash_estimates_agree_with_datasketch_and_exact_jaccard() -> None:
    """Outside references: the `datasketch` library's MinHash (PyPI datasketch, its own SHA-1
    based permutations) over the same shingle sets, and the exact Jaccard of Python sets. The
    published standard error of a k-slot estimate is sqrt(J(1-J)/k) <= 1/(2 sqrt(k)): the root
    mean square difference from datasketch stays within 1/sqrt(k) (two independent estimates),
    each estimate within 4.5 standard errors of the exact value, and ours has the published
    spread (RMS error within 25% of sqrt(mean J(1-J)/k)) and no bias."""
    datasketch = pytest.importorskip("datasketch")
    documents, similarities = pair_corpus(300, seed=11)
    ours = minhash(documents)
    k = OPTIONS.num_perm
    our_estimates, their_estimates = [], []
    for pair in range(len(similarities)):
        sketches = []
        for document in documents[2 * pair : 2 * pair + 2]:
            sketch = datasketch.MinHash(num_perm=k, seed=1)
            sketch.update_batch([" ".join(shingle).encode("utf-8") for shingle in shingle_set(reference_words(document))])
            sketches.append(sketch)
        their_estimates.append(sketches[0].jaccard(sketches[1]))
        our_estimates.append(float(estimated_jaccard(ours[2 * pair], ours[2 * pair + 1])))
    exact, mine, theirs = np.array(similarities), np.array(our_estimates), np.array(their_estimates)
    error = np.sqrt(exact * (1 - exact) / k)
    assert np.sqrt(np.mean((mine - theirs) ** 2)) <= 1 / math.sqrt(k)
    assert (np.abs(mine - exact) <= 4.5 * error + 1 / k).all()
    assert (np.abs(theirs - exact) <= 4.5 * error + 1 / k).all()
    spread = np.sqrt(np.mean((mine - exact) ** 2)) / np.sqrt(np.mean(exact * (1 - exact) / k))
    assert 0.75 <= spread <= 1.25, spread
    assert abs(np.mean(mine - exact)) <= 3.29 * np.sqrt(np.mean(exact * (1 - exact) / k) / len(exact))
    assert exact.min() < 0.4 and exact.max() == 1.0  # the pairs span the range


def test_verification_slots_estimate_like_full_slots() -> None:
    """The 16-bit verification slots give the same estimate as the full ones but for chance
    agreements (2**-16 a slot)."""
    documents, _ = pair_corpus(100, seed=13)
    full = minhash(documents)
    short = verification(full)
    assert short.dtype == np.uint16
    difference = estimated_jaccard(short[0::2], short[1::2]) - estimated_jaccard(full[0::2], full[1::2])
    assert (difference >= 0).all() and difference.sum() <= 2 / OPTIONS.num_perm


# --- banding against the S-curve --------------------------------------------------------------------


def test_detection_probability_reduces_to_the_banding_s_curve() -> None:
    """Published formula (Mining of Massive Datasets, ch. 3): a pair at similarity s shares a
    band with probability 1 - (1 - s**r)**b. With a threshold any shared band meets, the exact
    detection probability is that curve; with the default threshold it is lower."""
    loose = MinHashOptions(threshold=1 / 128)
    for s in (0.1, 0.5, 0.7, 0.8, 0.9, 1.0):
        curve = 1 - (1 - s**loose.rows) ** loose.bands
        assert detection_probability(s, loose) == pytest.approx(curve, abs=1e-12)
        assert detection_probability(s) <= curve + 1e-12
    assert detection_probability(0.95) > 0.999 and detection_probability(0.6) < 0.001


def binomial_bound(probabilities: np.ndarray) -> float:
    """z = 3.29 (two-sided 99.9%) times the standard deviation of a sum of Bernoulli trials."""
    return 3.29 * math.sqrt(float(np.sum(probabilities * (1 - probabilities)))) + 1.0


def test_candidates_and_detections_follow_the_s_curve_per_similarity_bucket() -> None:
    """Synthetic near-duplicates made by known edit rates (word substitutions, insertions,
    deletions, letter changes; case, punctuation and spacing changes): per bucket of exact
    Jaccard, the pairs sharing a band number as the S-curve 1 - (1 - s**r)**b predicts, and the
    detected pairs (shared band and agreeing slots >= threshold) as the exact probability of
    both predicts, within binomial bounds. Recall (detected among J >= 0.8) and precision
    (J >= 0.8 among detected) follow."""
    documents, similarities = pair_corpus(2000, seed=17)
    found = minhash(documents)
    keys = band_keys(found, OPTIONS.bands)
    candidate = (keys[0::2] == keys[1::2]).any(axis=1)
    detected = candidate & (estimated_jaccard(found[0::2], found[1::2]) >= OPTIONS.threshold)
    s = np.array(similarities)
    curve = 1 - (1 - s**OPTIONS.rows) ** OPTIONS.bands
    exact = np.array([detection_probability(value) for value in s])
    edges = np.linspace(0.0, 1.0, 11)
    for low, high in itertools.pairwise(edges):
        inside = (s >= low) & ((s < high) | (high == 1.0))
        if inside.sum() < 20:
            continue
        assert abs(candidate[inside].sum() - curve[inside].sum()) <= binomial_bound(curve[inside]), (low, high)
        assert abs(detected[inside].sum() - exact[inside].sum()) <= binomial_bound(exact[inside]), (low, high)
    above = s >= OPTIONS.threshold
    assert abs(detected[above].sum() - exact[above].sum()) <= binomial_bound(exact[above])  # recall
    assert abs(detected[~above].sum() - exact[~above].sum()) <= binomial_bound(exact[~above])  # precision
    assert (s > 0.9).sum() > 200 and ((s > 0.6) & (s < 0.9)).sum() > 300
    assert detected[s == 1.0].all()  # cosmetic changes only: always found


# --- clusters ---------------------------------------------------------------------------------------


def candidate_count(found: np.ndarray) -> int:
    """Distinct pairs of documents with different signatures that share a band key."""
    keys = band_keys(found, OPTIONS.bands)
    return sum(
        1 for i in range(len(found)) for j in range(i + 1, len(found)) if ((keys[i] == keys[j]) & (keys[i] != 0)).any() and not (found[i] == found[j]).all()
    )


def brute_force_clusters(found: np.ndarray, threshold: float) -> list[set[int]]:
    """Connected components of the pairs that share a band key and agree in >= threshold of
    their slots, every pair compared (Python sets)."""
    keys = band_keys(found, OPTIONS.bands)
    parent = list(range(len(found)))

    def root(x: int) -> int:
        while parent[x] != x:
            x = parent[x]
        return x

    for i in range(len(found)):
        for j in range(i + 1, len(found)):
            if ((keys[i] == keys[j]) & (keys[i] != 0)).any() and estimated_jaccard(found[i], found[j]) >= threshold:
                parent[max(root(i), root(j))] = min(root(i), root(j))
    groups: dict[int, set[int]] = {}
    for row in range(len(found)):
        groups.setdefault(root(row), set()).add(row)
    return sorted((g for g in groups.values() if len(g) > 1), key=min)


def partition(labels: np.ndarray) -> list[set[int]]:
    groups: dict[int, set[int]] = {}
    for row, label in enumerate(labels.tolist()):
        groups.setdefault(label, set()).add(row)
    return sorted((g for g in groups.values() if len(g) > 1), key=min)


def chain_corpus(seed: int, families: int = 12, length: int = 6) -> list[list[str]]:
    """Families of texts, each a chain of successive light edits (neighbours similar, the ends
    of a chain much less), exact copies with cosmetic changes, unrelated texts and empty ones."""
    rng = random.Random(seed)
    vocab = vocabulary(rng, 2000)
    documents: list[list[str]] = []
    for _ in range(families):
        text = [rng.choice(vocab) for _ in range(rng.randint(30, 120))]
        for _ in range(rng.randint(1, length)):
            documents.append([" ".join(text)])
            text = reference_words(edited(text, rng.uniform(0.0, 0.06), rng, vocab))
        for _ in range(rng.randint(0, 3)):
            documents.append(edited(text, 0.0, rng, vocab))
    documents += [[" ".join(rng.choice(vocab) for _ in range(rng.randint(1, 60)))] for _ in range(20)]
    documents += [[""], ["— !"]]
    rng.shuffle(documents)
    return documents


def in_memory(found: np.ndarray):
    return lambda rows: found[rows]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_clusters_equal_the_components_of_every_pair_compared(seed: int) -> None:
    """Clusters from band keys, one band at a time, equal the connected components of a brute
    force over all pairs (shared band and agreeing slots), exact copies included."""
    found = minhash(chain_corpus(seed))
    keys = band_keys(found, OPTIONS.bands)
    union, stats = cluster(keys.T, signature_digests(keys), in_memory(found), OPTIONS.threshold)
    expected = brute_force_clusters(found, OPTIONS.threshold)
    assert partition(union.labels()) == expected
    assert stats.long_runs == 0 and stats.confirmed > 0 and len(expected) >= 5
    # A pair is compared at most once, however many bands it shares.
    assert stats.compared - stats.confirmed > 0 and stats.compared <= candidate_count(found)


def test_a_rejected_pair_is_compared_once_however_many_bands_it_shares() -> None:
    """Pairs near J = 0.7 often share several bands yet fall short of the threshold; each is
    compared once: comparisons never exceed the distinct candidate pairs."""
    documents, _ = pair_corpus(150, seed=19, rates=(0.035, 0.05))
    found = minhash(documents)
    keys = band_keys(found, OPTIONS.bands)
    shared = ((keys[0::2] == keys[1::2]) & (keys[0::2] != 0)).sum(axis=1)
    _, stats = cluster(keys.T, signature_digests(keys), in_memory(found), OPTIONS.threshold)
    assert (shared >= 2).sum() > 20 and stats.compared - stats.confirmed > 20
    assert stats.compared <= candidate_count(found)


def test_copies_with_equal_signatures_stand_as_one_in_band_runs() -> None:
    """Hundreds of copies differing only in case and punctuation have one signature: one of them
    stands for all in the band runs, so they never make a run longer than the limit."""
    rng = random.Random(9)
    vocab = vocabulary(rng, 500)
    base = [rng.choice(vocab) for _ in range(50)]
    found = minhash([edited(base, 0.0, rng, vocab) for _ in range(200)] + [[" ".join(base[:40])]])
    keys = band_keys(found, OPTIONS.bands)
    union, stats = cluster(keys.T, signature_digests(keys), in_memory(found), OPTIONS.threshold, limit=3)
    assert stats.long_runs == 0 and partition(union.labels()) == brute_force_clusters(found, OPTIONS.threshold)


def test_runs_over_the_limit_are_counted_and_still_joined_where_similar() -> None:
    """A band key shared by more distinct signatures than the limit is compared with its first
    and previous members only, and counted; copies of one text are still joined."""
    rng = random.Random(8)
    vocab = vocabulary(rng, 2000)
    base = [rng.choice(vocab) for _ in range(200)]
    documents = [reference_words(edited(base, 0.01, rng, vocab)) for _ in range(12)]
    found = minhash([[" ".join(d)] for d in documents])
    keys = band_keys(found, OPTIONS.bands)
    union, stats = cluster(keys.T, signature_digests(keys), in_memory(found), OPTIONS.threshold, limit=3)
    assert stats.long_runs > 0
    assert partition(union.labels()) == brute_force_clusters(found, OPTIONS.threshold) == [set(range(12))]


def test_documents_without_words_never_join_a_cluster() -> None:
    """Documents without words have no band keys and no digest, however many there are."""
    found = minhash([[""], ["!!"], ["— ..."], ["one two three four five six"], ["One two, three four five six."]])
    keys = band_keys(found, OPTIONS.bands)
    assert (found[:3] == EMPTY).all() and (keys[:3] == 0).all() and (signature_digests(keys)[:3] == 0).all()
    union, _ = cluster(keys.T, signature_digests(keys), in_memory(found), OPTIONS.threshold)
    assert partition(union.labels()) == [{3, 4}]


@given(size=st.integers(1, 40), pairs=st.lists(st.tuples(st.integers(0, 39), st.integers(0, 39)), max_size=60))
def test_union_find_labels_each_row_with_the_least_row_of_its_component(size: int, pairs: list[tuple[int, int]]) -> None:
    """Labels equal a plain breadth-first search over the same pairs; each label is the least
    row of its component, whatever the order of the pairs."""
    pairs = [(a % size, b % size) for a, b in pairs]
    union = UnionFind(size)
    if pairs:
        union.union(np.array([a for a, _ in pairs]), np.array([b for _, b in pairs]))
    neighbours: dict[int, set[int]] = {row: set() for row in range(size)}
    for a, b in pairs:
        neighbours[a].add(b)
        neighbours[b].add(a)
    expected = []
    for row in range(size):
        seen, frontier = {row}, [row]
        while frontier:
            frontier = [n for x in frontier for n in neighbours[x] if n not in seen]
            seen.update(frontier)
        expected.append(min(seen))
    assert union.labels().tolist() == expected


# --- real text: Debian's fortunes ---------------------------------------------------------------------


def fortunes() -> list[str]:
    records = []
    for name in ENGLISH:
        text = require_file(FORTUNES / name, "fortunes").read_text(encoding="utf-8", errors="replace")
        records += [record.strip() for record in re.split(r"(?m)^%\n", text) if len(record.split()) >= 12]
    return records


def cosmetic_copy(text: str, rng: random.Random) -> str:
    """The text with case, punctuation and spacing changed: words upper-, lower- or
    title-cased; punctuation at their edges removed or added; apostrophes dropped or curled;
    straight quotes curled; line breaks, tabs and runs of spaces changed. (Punctuation between
    letters, as in "jem@latcs1.oz.au", is left: deleting it would join two words.)"""
    words = []
    for word in text.split():
        word = rng.choice([word.lower(), word.upper(), word.title(), word])
        roll = rng.random()
        if roll < 0.3:
            word = regex.sub(r"^\p{P}+|\p{P}+$", "", word) or word
        elif roll < 0.4:
            word += rng.choice([",", ";", "...", " --", ":"])
        word = word.replace("'", rng.choice(["", "\u2019"])).replace('"', rng.choice(["\u201c", "\u201d"]))
        words.append(word)
    return "".join(word + rng.choice([" ", "  ", "\n", "\t", " \n   "]) for word in words)


def test_fortunes_copies_differing_in_case_punctuation_or_spacing_are_found() -> None:
    """Real text: Debian's fortunes (records between `%` lines), tokenised by the default
    segmenter as the prepare step does. A copy of a fortune altered only in case, punctuation or
    spacing lands in its original's cluster, for every one of 300 sampled fortunes among all
    the others; and a cluster joins different fortunes only where their exact Jaccard is high."""
    records = fortunes()
    rng = random.Random(23)
    sample = rng.sample(range(len(records)), 300)
    texts = records + [cosmetic_copy(records[i], rng) for i in sample]
    segmenter = Segmenter.from_config(resolve({})["segment"])
    found = signatures(document_words(pa.array([segmenter.segment(t) for t in texts], pa.list_(pa.list_(pa.string())))))
    keys = band_keys(found, OPTIONS.bands)
    union, stats = cluster(keys.T, signature_digests(keys), in_memory(found), OPTIONS.threshold)
    labels = union.labels()
    copies = np.arange(len(records), len(texts))
    assert (labels[copies] == labels[np.array(sample)]).all()
    shingles = [shingle_set(reference_words([t])) for t in records]
    for group in partition(labels[: len(records)]):
        members = sorted(group)
        # Every member is near some other member (single linkage), by exact Jaccard.
        for i in members:
            assert max(jaccard(shingles[i], shingles[j]) for j in members if j != i) >= 0.6
    assert len(records) > 5000 and stats.long_runs == 0


# --- policies: the growth guarantee ---------------------------------------------------------------------


def as_array(prints: list[bytes]) -> np.ndarray:
    return np.frombuffer(b"".join(prints), dtype=np.uint8).reshape(-1, 16)


def decide(policy: str, labels: np.ndarray, ranks: np.ndarray, positions: np.ndarray, splits: np.ndarray):
    if policy == "drop":
        return drop_policy(labels, ranks, positions)
    return same_split_policy(labels, ranks, positions, splits)


def outcome(policy: str, present: list[int], prints: list[bytes], splits: list[str], pairs: set[tuple[int, int]], order: list[int], salt: str):
    """doc -> (kept, split, anchor, cluster members) for the present documents, listed in corpus
    order `order`, clustered by union-find over the pairs between present documents."""
    rows = {doc: row for row, doc in enumerate(order)}
    union = UnionFind(len(order))
    inside = [(rows[a], rows[b]) for a, b in pairs if a in rows and b in rows]
    if inside:
        union.union(np.array([a for a, _ in inside]), np.array([b for _, b in inside]))
    labels = union.labels()
    members = np.flatnonzero(np.bincount(labels, minlength=len(order))[labels] > 1)
    result = {doc: (True, splits[doc], doc, frozenset([doc])) for doc in present}
    if len(members):
        docs = [order[m] for m in members]
        keep, anchor = decide(policy, labels[members], anchor_ranks(as_array([prints[d] for d in docs]), salt), members, np.array([splits[d] for d in docs]))
        groups: dict[int, set[int]] = {}
        for doc, label in zip(docs, labels[members].tolist()):
            groups.setdefault(label, set()).add(doc)
        for index, doc in enumerate(docs):
            result[doc] = (bool(keep[index]), splits[doc], docs[anchor[index]], frozenset(groups[labels[members[index]]]))
    return result


def check_growth(policy: str, before: dict, after: dict, ranks: dict[int, int], splits: list[str]) -> None:
    """The guarantee written in steps.near_duplicates, between two successive corpora."""
    for doc, (kept, split, anchor, _) in after.items():
        if kept:
            assert split == splits[doc]  # a kept document is always in its own split
        if doc not in before:
            continue
        was_kept, _, old_anchor, old_group = before[doc]
        if was_kept and not kept:
            # Dropped only because its cluster's anchor changed to a member of smaller rank,
            # new or from an old cluster merged into its own.
            assert anchor != old_anchor and ranks[anchor] < ranks[doc]
            assert anchor not in before or anchor not in old_group
            if policy == "same_split":
                assert splits[anchor] != splits[doc]
        if policy == "drop" and not was_kept:
            assert not kept  # never kept again
    kept_groups: dict[frozenset, set[str]] = {}
    for kept, split, _, group in after.values():
        if kept:
            kept_groups.setdefault(group, set()).add(split)
    for found in kept_groups.values():
        assert len(found) == 1  # each cluster's kept members lie in one split
        if policy == "drop":
            assert sum(after[doc][0] for doc in group) == 1


@given(data=st.data(), policy=st.sampled_from(["drop", "same_split"]), salt=st.sampled_from(["corpusmill-split-v1", "other"]))
def test_adding_documents_never_moves_a_kept_document_and_drops_one_only_for_a_new_anchor(data, policy: str, salt: str) -> None:
    """Random growth sequences over a random similarity graph: documents arrive a few at a
    time, anywhere in corpus order (positions reshuffled every step). At every step: kept
    documents stay in their own split; a kept document is dropped only when its cluster's anchor
    became a member of smaller rank that is new or came from another old cluster (so one new
    document near two old clusters is covered); under drop, dropped documents stay dropped."""
    size = data.draw(st.integers(2, 24))
    pairs = set(data.draw(st.lists(st.tuples(st.integers(0, size - 1), st.integers(0, size - 1)), max_size=40)))
    prints = [hashlib.blake2b(f"document {d}".encode(), digest_size=16).digest() for d in range(size)]
    splits = [assign_split(p, salt, SPREAD) for p in prints]
    ranks = dict(enumerate(anchor_ranks(as_array(prints), salt).tolist()))
    arrival = data.draw(st.permutations(range(size)))
    steps = data.draw(st.lists(st.integers(1, 4), min_size=1, max_size=size))
    present: list[int] = []
    before: dict = {}
    for step in steps:
        present = present + list(arrival[len(present) : len(present) + step])
        order = data.draw(st.permutations(present))
        after = outcome(policy, present, prints, splits, pairs, list(order), salt)
        check_growth(policy, before, after, ranks, splits)
        before = after


def test_a_new_document_near_two_old_clusters_merges_them_under_the_least_rank() -> None:
    """Two old clusters {A1, A2} and {B1, B2}; a new document C near A2 and B1 joins them into
    one cluster whose anchor is the least rank of all five. Under drop the other old anchor is
    dropped, its anchor now the new one, which is C or came from the other cluster; under
    same_split the members outside the new anchor's split are dropped. No kept document moves."""
    prints = [fingerprint(name) for name in ("A1", "A2", "B1", "B2", "C")]
    splits = [assign_split(p, "corpusmill-split-v1", SPREAD) for p in prints]
    ranks = dict(enumerate(anchor_ranks(as_array(prints), "corpusmill-split-v1").tolist()))
    old = {(0, 1), (2, 3)}
    for policy in ("drop", "same_split"):
        before = outcome(policy, [0, 1, 2, 3], prints, splits, old, [0, 1, 2, 3], "corpusmill-split-v1")
        after = outcome(policy, [0, 1, 2, 3, 4], prints, splits, old | {(4, 1), (2, 4)}, [4, 0, 1, 2, 3], "corpusmill-split-v1")
        check_growth(policy, before, after, ranks, splits)
        least = min(range(5), key=ranks.__getitem__)
        assert {after[d][2] for d in range(5)} == {least} and after[0][3] == frozenset(range(5))
        if policy == "drop":
            assert [d for d in range(5) if after[d][0]] == [least]
            assert sum(before[d][0] and not after[d][0] for d in range(4)) == 1 + (least == 4)
        else:
            assert [d for d in range(5) if after[d][0]] == [d for d in range(5) if splits[d] == splits[least]]


def test_growth_guarantee_holds_end_to_end_with_real_signatures() -> None:
    """The same guarantee with clusters formed by the real pipeline (words, signatures, band
    keys, `cluster`) over chains of edited texts, which a late-arriving middle link merges; the
    content fingerprint and salted split of steps.split name each document."""
    # Exact copies are removed before (steps.split), so every text here is distinct.
    texts = list(dict.fromkeys(" ".join(d) for d in chain_corpus(seed=31, families=10, length=8)))
    found = minhash([[t] for t in texts])
    prints = [fingerprint(t) for t in texts]
    rng = random.Random(4)
    for policy in ("drop", "same_split"):
        splits = [assign_split(p, "corpusmill-split-v1", SPREAD) for p in prints]
        ranks = dict(enumerate(anchor_ranks(as_array(prints), "corpusmill-split-v1").tolist()))
        arrival = rng.sample(range(len(texts)), len(texts))
        before: dict = {}
        merges = drops = 0
        for count in range(4, len(texts) + 1, 4):
            present = arrival[:count]
            order = rng.sample(present, len(present))
            subset = found[order]
            keys = band_keys(subset, OPTIONS.bands)
            union, stats = cluster(keys.T, signature_digests(keys), in_memory(subset), OPTIONS.threshold)
            assert stats.long_runs == 0
            labels = union.labels()
            pairs = {(order[i], order[labels[i]]) for i in range(len(order)) if labels[i] != i}
            after = outcome(policy, present, prints, splits, pairs, order, "corpusmill-split-v1")
            check_growth(policy, before, after, ranks, splits)
            merges += sum(1 for doc, v in after.items() if doc in before and len({before[d][2] for d in v[3] if d in before}) > 1)
            drops += sum(1 for doc, v in after.items() if doc in before and before[doc][0] and not v[0])
            before = after
        assert merges > 0 and drops > 0  # the sequence exercises merges and later drops


def test_anchor_ranks_are_salted_and_independent_of_the_split_draw() -> None:
    """Another salt reorders the ranks; with one salt, the anchor's split follows the split
    shares (a cluster lands in train about as often as a single document does), checked over
    2,000 pairs within the binomial 99.9% interval."""
    prints = [fingerprint(f"text {i}") for i in range(4000)]
    first, second = anchor_ranks(as_array(prints), "corpusmill-split-v1"), anchor_ranks(as_array(prints), "another")
    assert (first != second).all()
    labels = np.repeat(np.arange(2000), 2)
    splits = np.array([assign_split(p, "corpusmill-split-v1", SPREAD) for p in prints])
    anchors = cluster_anchors(labels, first, np.arange(4000))
    train = np.count_nonzero(splits[anchors[0::2]] == "train")
    p = SPREAD["train"]
    assert abs(train - 2000 * p) <= 3.29 * math.sqrt(2000 * p * (1 - p))


def test_options_must_split_permutations_into_whole_bands() -> None:
    with pytest.raises(ValueError, match="bands \\(3\\) must divide num_perm"):
        MinHashOptions(bands=3)
    with pytest.raises(ValueError, match="threshold must lie in"):
        MinHashOptions(threshold=0.0)
    assert MinHashOptions().rows == 8
