"""`corpusmill trace BUILD FILE ROW`: the source text of one shard row, with its target marked.

Why: a training row that looks wrong (a strange target, a block of markup) should lead back to
the text it was cut from in one command. The row's provenance (steps.formats, provenance) gives
its stream position; the document table gives the document (input file, byte offset), the
sentence and the token. The document is read again from its input file at that offset, cleaned
and segmented as the build did (its configuration in manifest.json), and encoded with the
build's vocabulary or subword model; its ids must equal the row's, or the command stops (the
input file changed since the build).

Output marks, in the sentence text as the build cleaned it: `[[target]]`, and `{{…}}` around the
n-1 context ids of an n-gram row (with the <s> that pad a sentence start) or around the ids of
a block row; `<s>` and `</s>` appear where a marked stretch holds them.

Every file read resolves, symlinks followed, inside the build folder (the input files: inside
the corpus folder), as the reader requires (steps.reader.resolve_inside).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from .clean import CleanOptions, clean_text
from .encoder import WordEncoder
from .formats import BOS, EOS, PAD, FormatError, Vocabulary, read_vocabulary
from .ingest import CorpusError, ReadOptions, document_at
from .layout import RELATIVE, Layout
from .prepare import read_abbreviations
from .provenance import Documents, Place, position_of_row, read_documents
from .reader import MANIFEST, MAX_MANIFEST_BYTES, MAX_VOCABULARY_BYTES, SHARD_FIELDS, file_problem, parse_manifest, resolve_inside
from .segment import Segmenter

# The manifest fields the command reads, with their types (steps.reader.structure_problem).
TRACE_FIELDS = {
    "config": {"units": str, "corpus": {"root": str}, "windows": {"ngram": {"n": int}}},
    "vocabulary": {"file": str},
    "splits": {"*": {"shards": [SHARD_FIELDS]}},
}


class TraceError(Exception):
    """A row that cannot be traced; the message names the file and what to do."""


@dataclass(frozen=True)
class Sentence:
    """One sentence of a traced document: its text as cleaned, each token's (start, end) in it
    (words, or pieces for subword units) and each token's id."""

    text: str
    spans: list[tuple[int, int]]
    ids: list[int]
    pieces: list[str] | None = None  # subword units: each piece, shown where its span is empty (a byte of a character)


@dataclass(frozen=True)
class Traced:
    """One shard row and where its ids come from."""

    file: str
    split: str
    kind: str
    row: int
    ids: list[int]  # the row's ids as stored (an n-gram row: context, then target)
    places: list[Place]  # one per id of the row
    documents: Documents
    texts: dict[int, list[Sentence]]  # document (row of the document table) → its sentences
    vocabulary: Vocabulary


def _inside(real_root: Path, name: str, what: str, limit: int | None = None) -> Path:
    target, problem = resolve_inside(real_root, name)
    problem = problem or file_problem(target, limit)
    if problem:
        raise TraceError(f"{real_root / name}: {what} {problem}; rerun the workflow (snakemake) on this build folder to write it")
    return target


def _row_ids(path: Path, kind: str, row: int) -> list[int]:
    """The ids of one row, reading only the row group that holds it."""
    parquet = pq.ParquetFile(path)
    ends = np.cumsum([parquet.metadata.row_group(g).num_rows for g in range(parquet.num_row_groups)])
    group = int(np.searchsorted(ends, row, side="right"))
    first = int(ends[group - 1]) if group else 0
    record = parquet.read_row_group(group, use_threads=False).slice(row - first, 1).to_pylist()[0]
    if kind == "ngram":
        return [*record["context"], record["target"]]
    return list(record["ids"])


def _spans(text: str, tokens: list[str]) -> list[tuple[int, int]]:
    """Where each token lies in `text` (tokens rebuild it up to whitespace: steps.segment)."""
    spans, position = [], 0
    for token in tokens:
        found = text.find(token, position)
        start = position if found < 0 else found
        spans.append((start, start + len(token)))
        position = start + len(token)
    return spans


class DocumentReader:
    """Reads documents from the input files again and cuts them as the build did."""

    def __init__(self, real_root: Path, config: dict, corpus: str | None, vocabulary: Vocabulary) -> None:
        self.config = config
        self.corpus = Path(corpus or config["corpus"]["root"]).resolve()
        self.options = ReadOptions.from_config(config["corpus"])
        self.clean = CleanOptions.from_config(config["clean"])
        learned = config["segment"]["learn_abbreviations"]
        abbreviations = read_abbreviations(str(_inside(real_root, RELATIVE.abbreviations, "(learned abbreviations)")) if learned else None)
        self.segmenter = Segmenter.from_config(config["segment"], abbreviations)
        # The same words with numbers unmasked: what the text holds, to find each token in it.
        self.words = dataclasses.replace(self.segmenter, numbers="keep")
        self.subword = config["units"] == "subword"
        if self.subword:
            import sentencepiece as spm

            model = _inside(real_root, RELATIVE.subword_model, "(the subword model)")
            self.pieces = spm.SentencePieceProcessor(model_file=str(model))
        else:
            self.encoder = WordEncoder(vocabulary, config["vocabulary"]["unknown"])

    def sentences(self, source: str, offset: int) -> list[Sentence]:
        target, problem = resolve_inside(self.corpus, source)
        if problem or (problem := file_problem(target)):
            raise TraceError(f"{self.corpus / source}: the input file {problem}; pass --corpus with the folder that holds the input files now")
        try:
            document = document_at(self.corpus, source, offset, self.options)
        except CorpusError as error:
            raise TraceError(str(error)) from None
        if document is None:
            raise TraceError(
                f"{target}: no document starts at byte {offset}; the file changed since the build: rebuild, or pass --corpus with the files it was built from"
            )
        text = clean_text(document.text, self.clean)
        if self.subword:
            return [self._pieces(sentence) for sentence in self.segmenter.sentences(text)]
        found = []
        for sentence in self.segmenter.sentences(text):
            tokens = self.segmenter.tokens(sentence)
            if tokens:
                ids = self.encoder.ids(pa.array(tokens, pa.string())).tolist()
                found.append(Sentence(sentence, _spans(sentence, self.words.tokens(sentence)), ids))
        return found

    def _pieces(self, sentence: str) -> Sentence:
        encoded = self.pieces.encode(sentence, out_type="offset_mapping")  # character offsets of each piece
        return Sentence(sentence, [(int(b), int(e)) for b, e in encoded["offsets"]], list(encoded["ids"]), list(encoded["pieces"]))


def trace_row(build: str | Path, file: str, row: int, corpus: str | None = None) -> Traced:
    """The row `row` of shard file `file` (as manifest.json names it) with its source text."""
    real_root = Path(build).resolve()
    manifest_path = _inside(real_root, MANIFEST, "(the build's description)", MAX_MANIFEST_BYTES)
    manifest, problem = parse_manifest(manifest_path.read_bytes(), TRACE_FIELDS)
    if problem:
        raise TraceError(f"{manifest_path}: {problem}; rerun the workflow (snakemake) on this build folder to write it")
    entries = {entry["file"]: (split, entry) for split, figures in manifest["splits"].items() for entry in figures["shards"]}
    name = Path(file).resolve().relative_to(real_root).as_posix() if Path(file).resolve().is_relative_to(real_root) else file
    if name not in entries:
        examples = ", ".join(sorted(entries)[:3])
        raise TraceError(f"{real_root / MANIFEST}: lists no shard file {file!r}; name one as the manifest does, e.g. {examples}")
    split, entry = entries[name]
    kind, chunk, rows = entry["kind"], entry["chunk"], entry["rows"]
    if not 0 <= row < rows:
        raise TraceError(f"{real_root / name}: holds rows 0 to {rows - 1}; row {row} does not exist")
    layout = Layout("")
    ids = _row_ids(_inside(real_root, name, "(the shard file)"), kind, row)
    try:
        position = position_of_row(_inside(real_root, layout.provenance(split, kind, chunk), "(its provenance table)"), row)
        documents = read_documents(_inside(real_root, layout.provenance_documents(split, chunk), "(its document table)"))
    except (FormatError, pa.ArrowException, KeyError, ValueError) as error:
        raise TraceError(f"{real_root / layout.provenance(split, kind, chunk)}: unreadable ({error}); rerun the workflow to write it again") from None
    config = manifest["config"]
    n = config["windows"]["ngram"]["n"]
    if kind == "ngram":
        target = documents.place(position)
        first = max(0, target.token - (n - 1))
        places = [Place(-2, 0, 0)] * (n - 1 - (target.token - first)) + [dataclasses.replace(target, token=t) for t in range(first, target.token + 1)]
    else:
        places = [documents.place(position + k) for k in range(len(ids))]
    vocabulary = read_vocabulary(_inside(real_root, manifest["vocabulary"]["file"], "(the vocabulary)", MAX_VOCABULARY_BYTES))
    reader = DocumentReader(real_root, config, corpus, vocabulary)
    texts = {
        document: reader.sentences(documents.sources[document], documents.offsets[document])
        for document in sorted({place.document for place in places if place.document >= 0})
    }
    traced = Traced(name, split, kind, row, ids, places, documents, texts, vocabulary)
    check(traced)
    return traced


def traced_id(traced: Traced, place: Place) -> int:
    """The id the source text gives at `place` (<s>, </s> or a token's; <pad> past the end)."""
    vocabulary = traced.vocabulary
    if place.document == -2:
        return vocabulary.id(BOS)
    if place.document < 0:
        return vocabulary.id(PAD)
    if place.token < 0:
        return vocabulary.id(BOS)
    sentence = traced.texts[place.document][place.sentence]
    return vocabulary.id(EOS) if place.token == len(sentence.ids) else sentence.ids[place.token]


def check(traced: Traced) -> None:
    """Stop unless the source text gives the row's ids and the stored sentence lengths."""
    for document, sentences in traced.texts.items():
        if [len(s.ids) for s in sentences] != traced.documents.sentences[document]:
            where = f"{traced.documents.sources[document]} at byte {traced.documents.offsets[document]}"
            raise TraceError(f"{where}: the document no longer gives the sentences the build cut; the file changed since the build: rebuild")
    found = [traced_id(traced, place) for place in traced.places]
    if found != traced.ids:
        raise TraceError(
            f"{traced.file}: row {traced.row} holds ids {traced.ids}, but its source text gives {found}; "
            "rebuild, or pass --corpus with the files it was built from"
        )


def _render(sentence: Sentence, marked: set[int], target: int | None, start: str) -> str:
    """A sentence with `{{…}}` around its marked tokens and `[[…]]` around the target; token -1
    is the <s> before it (shown as `start`), token len(spans) its </s>."""
    text, spans = sentence.text, sentence.spans
    items, last = [], 0  # (shown text, text before it, token)
    if -1 in marked or target == -1:
        items.append((start, "", -1))
    for token, (begin, end) in enumerate(spans):
        shown = text[begin:end] if end > begin or sentence.pieces is None else sentence.pieces[token]
        items.append((shown, text[last:begin] or (" " if token == 0 and items else ""), token))
        last = max(last, end)
    tail, closing = text[last:], len(spans)
    if closing in marked or target == closing:
        items.append((EOS, tail + " ", closing))
        tail = ""
    out, inside = [], False
    for shown, gap, token in items:
        if inside and token not in marked:
            out.append("}}")
            inside = False
        out.append(gap)
        if token in marked and not inside:
            out.append("{{")
            inside = True
        out.append(f"[[{shown}]]" if token == target else shown)
    out.append("}}" if inside else "")
    return "".join(out) + tail


def format_trace(traced: Traced, target: int | None = None) -> str:
    """The lines `corpusmill trace` prints. `target`: which id of a block or stream row to mark
    as the target (an n-gram row's is its own)."""
    documents = traced.documents
    if traced.kind == "ngram":
        target = len(traced.ids) - 1
    tokens = [traced.vocabulary.tokens[i] for i in traced.ids]
    lines = [f"{traced.file}, row {traced.row} ({traced.split}, {traced.kind})"]
    if traced.kind == "ngram":
        lines.append(f"ids:      context {' '.join(map(str, traced.ids[:-1]))} -> target {traced.ids[-1]}")
        lines.append(f"tokens:   context {' '.join(tokens[:-1])} -> target {tokens[-1]}")
    else:
        more = " …" if len(traced.ids) > 12 else ""
        lines.append(f"ids:      {len(traced.ids)}: {' '.join(map(str, traced.ids[:12]))}{more}")
        lines.append(f"tokens:   {' '.join(tokens[:12])}{more}")
        if target is not None:
            lines.append(f"target:   id {target} of the row: {traced.ids[target]} {tokens[target]}")
    real = [place for place in traced.places if place.document >= 0]
    first, last = (real[-1], real[-1]) if traced.kind == "ngram" else (real[0], real[-1])
    lines.append(f"place:    sentence {first.sentence}, token {first.token}" + ("" if first == last else f" to sentence {last.sentence}, token {last.token}")
                 + " (token -1: the document's <s>; token = the sentence's length: its </s>)")  # fmt: skip
    marks: dict[tuple[int, int], set[int]] = {}
    targets: dict[tuple[int, int], int] = {}
    pads = sum(1 for place in traced.places if place.document == -2)
    for index, place in enumerate(traced.places):
        key = (place.document, place.sentence)
        if index == target and place.document >= 0:
            targets[key] = place.token
        elif place.document >= 0 and traced.kind != "stream":
            marks.setdefault(key, set()).add(place.token)
    if pads:
        marks.setdefault((real[-1].document, real[-1].sentence), set()).add(-1)
    start = " ".join([BOS] * pads) if pads else BOS
    for document in sorted(traced.texts):
        lines.append(f"document: {documents.doc_ids[document]} ({documents.sources[document]}, byte {documents.offsets[document]})")
        for number, sentence in enumerate(traced.texts[document]):
            key = (document, number)
            if key in marks or key in targets or traced.kind == "stream":
                lines.append(f"  sentence {number}: {_render(sentence, marks.get(key, set()), targets.get(key), start)}")
    padding = sum(1 for place in traced.places if place.document == -1)
    if padding:
        lines.append(f"  then {padding} x {PAD} (the padded last block of the chunk)")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(
        prog="corpusmill trace",
        description="Print the source text of one shard row: its input file, byte offset, sentence and token, "
        "with the target marked [[…]] and the context or block marked {{…}}.",
    )
    parser.add_argument("build", help="the build folder (the one holding manifest.json)")
    parser.add_argument("file", help="the shard file as manifest.json names it, e.g. shards/dev/ngram-CHUNK.parquet")
    parser.add_argument("row", type=int, help="the row number in that file, from 0")
    parser.add_argument("--target", type=int, metavar="K", help="block and stream rows: mark id K of the row (from 0) as the target")
    parser.add_argument("--corpus", metavar="FOLDER", help="where the input files are now (default: corpus.root of the build's configuration)")
    parser.add_argument("--json", action="store_true", help="print the row's provenance as JSON instead of the text")
    args = parser.parse_args(argv)
    try:
        traced = trace_row(args.build, args.file, args.row, args.corpus)
        if args.target is not None and not 0 <= args.target < len(traced.ids):
            raise TraceError(f"{traced.file}: row {args.row} holds {len(traced.ids)} ids; --target must lie in 0..{len(traced.ids) - 1}")
    except TraceError as error:
        raise SystemExit(f"corpusmill: {error}") from None
    print(json.dumps(provenance_record(traced), indent=2) if args.json else format_trace(traced, args.target))


def provenance_record(traced: Traced) -> dict:
    """The row's documents, and per id of the row its document, sentence and token."""
    documents = traced.documents
    used = sorted(traced.texts)
    return {
        "file": traced.file,
        "split": traced.split,
        "kind": traced.kind,
        "row": traced.row,
        "ids": traced.ids,
        "documents": [{"doc_id": documents.doc_ids[d], "source": documents.sources[d], "offset": documents.offsets[d]} for d in used],
        "places": [None if p.document < 0 else {"document": used.index(p.document), "sentence": p.sentence, "token": p.token} for p in traced.places],
    }
