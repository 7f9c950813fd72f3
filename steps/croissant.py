"""Croissant: the build described in MLCommons Croissant 1.1 (JSON-LD), so that other tools and
people can find its files, check them and load every row kind without reading corpusmill's code.

Everything comes from the manifest (files, checksums, sizes, figures, the resolved configuration
with its `metadata` section) and the Parquet footers of the shards (column types), so the file
is byte-identical for identical builds: no wall-clock date (datePublished only when the user
gives it).

Layout of the description:
- distribution: every shard as a FileObject (relative contentUrl, sha256, contentSize); one
  FileSet per split and kind listing exactly that split's files of that kind (includes are the
  manifest's paths, glob characters escaped), which is what a record set reads; the vocabulary
  (vocabulary.tsv) and, in subword mode, the sentencepiece model.
- recordSet: one per kind and split (`ngram-train`, `block-dev`, …) with the columns of the
  Parquet schema, and `vocabulary` (id, token, count, kind).

The vocabulary record set reads a Parquet copy of vocabulary.tsv (`sameAs` it) written beside
this file: Croissant readers parse TSV with CSV conventions (a field starting with `"` opens a
quoted string; NA, null, nan become missing), and a vocabulary holds exactly such tokens.
"""

from __future__ import annotations

import copy
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from . import job
from .formats import KINDS, VOCABULARY_HEADER, file_sha256, read_vocabulary
from .layout import SPLITS
from .settings import read_json
from .storage import write_json, write_table

# The columns of vocabulary.tsv (its header) with their types, for its Parquet copy.
VOCABULARY_COLUMNS = dict(zip(VOCABULARY_HEADER.split("\t"), (pa.int64(), pa.string(), pa.int64(), pa.string())))

RULE = "croissant"
SECTIONS = ()  # the manifest holds the resolved configuration

CONFORMS_TO = "http://mlcommons.org/croissant/1.1"
PARQUET = "application/x-parquet"
TSV = "text/tab-separated-values"
# A sentencepiece model has no registered media type; Croissant then asks for a URL naming the format.
SENTENCEPIECE = "https://github.com/google/sentencepiece"

# The JSON-LD context of Croissant 1.1 as its reference library (mlcroissant) writes and expects it.
CONTEXT = {
    "@language": "en",
    "@vocab": "https://schema.org/",
    "arrayShape": "cr:arrayShape",
    "citeAs": "cr:citeAs",
    "column": "cr:column",
    "conformsTo": "dct:conformsTo",
    "containedIn": "cr:containedIn",
    "cr": "http://mlcommons.org/croissant/",
    "data": {"@id": "cr:data", "@type": "@json"},
    "dataType": {"@id": "cr:dataType", "@type": "@vocab"},
    "dct": "http://purl.org/dc/terms/",
    "equivalentProperty": "cr:equivalentProperty",
    "examples": {"@id": "cr:examples", "@type": "@json"},
    "extract": "cr:extract",
    "field": "cr:field",
    "fileObject": "cr:fileObject",
    "fileProperty": "cr:fileProperty",
    "fileSet": "cr:fileSet",
    "format": "cr:format",
    "includes": "cr:includes",
    "isArray": "cr:isArray",
    "isLiveDataset": "cr:isLiveDataset",
    "jsonPath": "cr:jsonPath",
    "key": "cr:key",
    "md5": "cr:md5",
    "parentField": "cr:parentField",
    "path": "cr:path",
    "rai": "http://mlcommons.org/croissant/RAI/",
    "recordSet": "cr:recordSet",
    "references": "cr:references",
    "regex": "cr:regex",
    "repeated": "cr:repeated",
    "replace": "cr:replace",
    "samplingRate": "cr:samplingRate",
    "sc": "https://schema.org/",
    "separator": "cr:separator",
    "source": "cr:source",
    "subField": "cr:subField",
    "transform": "cr:transform",
}

DATA_TYPES = {
    pa.uint8(): "cr:UInt8",
    pa.uint16(): "cr:UInt16",
    pa.uint32(): "cr:UInt32",
    pa.uint64(): "cr:UInt64",
    pa.int8(): "cr:Int8",
    pa.int16(): "cr:Int16",
    pa.int32(): "cr:Int32",
    pa.int64(): "cr:Int64",
    pa.float32(): "cr:Float32",
    pa.float64(): "cr:Float64",
    pa.bool_(): "sc:Boolean",
    pa.string(): "sc:Text",
    pa.large_string(): "sc:Text",
}

KIND_DESCRIPTIONS = {
    "ngram": "Rows for feed-forward n-gram models: n-1 context ids and the id that follows them.",
    "block": "Fixed-length id blocks for recurrent and transformer models: inputs are ids[:-1], targets ids[1:].",
    "stream": "Each document's whole id stream: <s>, then each sentence followed by </s>.",
}
COLUMN_DESCRIPTIONS = {
    ("ngram", "context"): "The n-1 ids before the target; sentence starts are padded with <s>.",
    ("ngram", "target"): "The id to predict.",
    ("block", "ids"): "L+1 consecutive ids.",
    ("stream", "doc_id"): "The document's id: path and byte offset, or the id field of a JSONL record.",
    ("stream", "ids"): "The document's ids.",
}
VOCABULARY_DESCRIPTIONS = {
    "id": "The id that the shards use for this token.",
    "token": "The token (word, subword piece or reserved symbol).",
    "count": "Occurrences in the train split (for unknown classes: train tokens mapped to the class).",
    "kind": "reserved, unknown (an out-of-vocabulary class) or word; in subword mode piece, byte or control.",
}


@dataclass(frozen=True)
class LocalFile:
    """A file of the build: path relative to the build folder, SHA-256 and size in bytes."""

    path: str
    sha256: str
    bytes: int


_GLOB_CHARACTERS = re.compile(r"[*?\[\]]")


def glob_escape(path: str) -> str:
    """A glob pattern matching exactly `path` (each of * ? [ ] as a one-character class)."""
    return _GLOB_CHARACTERS.sub(lambda m: f"[{m.group()}]", path)


def _file_object(identifier: str, path: str, sha256: str, size: int, encoding: str, description: str) -> dict:
    return {
        "@type": "cr:FileObject",
        "@id": identifier,
        "name": identifier,
        "description": description,
        "contentUrl": path,
        "contentSize": f"{size} B",
        "encodingFormat": encoding,
        "sha256": sha256,
    }


def _data_type(record_set: str, column: pa.Field) -> tuple[str, dict]:
    """The Croissant data type of a Parquet column, and the array properties of a list column."""
    kind, array = column.type, {}
    if pa.types.is_fixed_size_list(kind):
        kind, array = kind.value_type, {"isArray": True, "arrayShape": str(kind.list_size)}
    elif pa.types.is_list(kind) or pa.types.is_large_list(kind):
        kind, array = kind.value_type, {"isArray": True, "arrayShape": "-1"}
    if kind not in DATA_TYPES:
        raise SystemExit(
            f"corpusmill: croissant: column {column.name!r} of {record_set} has the Parquet type {column.type}, "
            f"which steps/croissant.py cannot name yet: add its Croissant data type to DATA_TYPES"
        )
    return DATA_TYPES[kind], array


def _field(record_set: str, column: pa.Field, source: dict, description: str) -> dict:
    data_type, array = _data_type(record_set, column)
    return {
        "@type": "cr:Field",
        "@id": f"{record_set}/{column.name}",
        "name": column.name,
        **({"description": description} if description else {}),
        "dataType": data_type,
        **array,
        "source": {**source, "extract": {"column": column.name}},
    }


def _shards_by_split_and_kind(manifest: dict) -> dict[tuple[str, str], list[dict]]:
    groups: dict[tuple[str, str], list[dict]] = {}
    for split in SPLITS:
        for entry in manifest["splits"].get(split, {}).get("shards", []):
            groups.setdefault((split, entry["kind"]), []).append(entry)
    return {key: sorted(entries, key=lambda e: e["file"]) for key, entries in groups.items()}


def _description(manifest: dict) -> str:
    """What the build holds, for a build whose configuration gives no description."""
    splits = manifest["splits"]
    kinds = sorted({entry["kind"] for split in splits.values() for entry in split["shards"]}, key=KINDS.index)
    documents = ", ".join(f"{splits[s]['documents']:,} {s}" for s in SPLITS if s in splits)
    return (
        f"Tokenized, vocabulary-mapped text in Parquet shards ({', '.join(kinds)} rows) from "
        f"{len(manifest['inputs']):,} input files: {documents} documents, a vocabulary of "
        f"{manifest['vocabulary']['size']:,} ids. Built by corpusmill."
    )


def dataset_name(manifest: dict) -> str:
    """metadata.name, or the name of the corpus folder when the user gave none."""
    config = manifest["config"]
    return config.get("metadata", {}).get("name") or Path(config["corpus"]["root"]).name or "corpus"


def license_url(license: str) -> str:
    """A license as Croissant recommends it, a URL: an SPDX identifier becomes its spdx.org page."""
    return license if license.startswith(("http://", "https://")) else f"https://spdx.org/licenses/{license}.html"


def _creator(entry: dict) -> dict:
    creator = {"@type": "sc:Organization" if entry.get("type") == "organization" else "sc:Person", "name": entry["name"]}
    for key in ("email", "url"):
        if entry.get(key):
            creator[key] = entry[key]
    return creator


def build_croissant(manifest: dict, schemas: Mapping[str, pa.Schema], sizes: Mapping[str, int], vocabulary_copy: LocalFile) -> dict:
    """The Croissant description of a build from its manifest, the Parquet schema of each kind,
    the sizes of the files the manifest gives no size for (vocabulary, subword model) and the
    Parquet copy of the vocabulary."""
    metadata = manifest["config"].get("metadata", {})
    document: dict = {
        "@context": copy.deepcopy(CONTEXT),  # a reader may add to the document it is given
        "@type": "sc:Dataset",
        "conformsTo": CONFORMS_TO,
        "name": dataset_name(manifest),
        "description": metadata.get("description") or _description(manifest),
    }
    if metadata.get("license"):
        document["license"] = license_url(metadata["license"])
    for key, target in (("citation", "citeAs"), ("url", "url"), ("version", "version"), ("date_published", "datePublished")):
        if metadata.get(key):
            document[target] = metadata[key]
    if metadata.get("creators"):
        document["creator"] = [_creator(entry) for entry in metadata["creators"]]

    distribution: list[dict] = []
    record_sets: list[dict] = []
    groups = _shards_by_split_and_kind(manifest)
    for split, kind in sorted(groups, key=lambda key: (KINDS.index(key[1]), SPLITS.index(key[0]))):
        entries = groups[(split, kind)]
        name = f"{kind}-{split}"
        for entry in entries:
            distribution.append(
                _file_object(
                    entry["file"],
                    entry["file"],
                    entry["sha256"],
                    entry["bytes"],
                    PARQUET,
                    f"{split} {kind} rows of chunk {entry['chunk']}: {entry['rows']:,} rows.",
                )
            )
        distribution.append(
            {
                "@type": "cr:FileSet",
                "@id": f"{name}-files",
                "name": f"{name}-files",
                "description": f"The {split} split's {kind} shards.",
                "encodingFormat": PARQUET,
                "includes": [glob_escape(entry["file"]) for entry in entries],
            }
        )
        rows = sum(entry["rows"] for entry in entries)
        record_sets.append(
            {
                "@type": "cr:RecordSet",
                "@id": name,
                "name": name,
                "description": f"{KIND_DESCRIPTIONS[kind]} Split {split}: {rows:,} rows.",
                "field": [
                    _field(name, column, {"fileSet": {"@id": f"{name}-files"}}, COLUMN_DESCRIPTIONS.get((kind, column.name), "")) for column in schemas[kind]
                ],
            }
        )

    vocabulary = manifest["vocabulary"]
    distribution.append(
        _file_object(
            vocabulary["file"],
            vocabulary["file"],
            vocabulary["sha256"],
            sizes[vocabulary["file"]],
            TSV,
            f"The vocabulary: a header line, then id, token, count and kind of each of its {vocabulary['size']:,} ids.",
        )
    )
    table = _file_object(
        vocabulary_copy.path,
        vocabulary_copy.path,
        vocabulary_copy.sha256,
        vocabulary_copy.bytes,
        PARQUET,
        f"{vocabulary['file']} as a Parquet table (columns id, token, count, kind), for readers that parse TSV as CSV.",
    )
    distribution.append({**table, "sameAs": vocabulary["file"]})
    if "subword_model" in vocabulary:
        model = vocabulary["subword_model"]
        distribution.append(
            _file_object(
                model["file"],
                model["file"],
                model["sha256"],
                sizes[model["file"]],
                SENTENCEPIECE,
                "The sentencepiece model that splits cleaned text into the vocabulary's pieces.",
            )
        )
    record_sets.append(
        {
            "@type": "cr:RecordSet",
            "@id": "vocabulary",
            "name": "vocabulary",
            "description": "The vocabulary in id order: every id of the shards and its token.",
            "key": {"@id": "vocabulary/id"},
            "field": [
                _field("vocabulary", pa.field(name, kind), {"fileObject": {"@id": vocabulary_copy.path}}, VOCABULARY_DESCRIPTIONS[name])
                for name, kind in VOCABULARY_COLUMNS.items()
            ],
        }
    )
    return {**document, "distribution": distribution, "recordSet": record_sets}


def read_schemas(build_dir: Path, manifest: dict) -> dict[str, pa.Schema]:
    """The Parquet schema of each kind, from the footer of its first shard (all shards of a kind share it)."""
    schemas: dict[str, pa.Schema] = {}
    for split in manifest["splits"].values():
        for entry in split["shards"]:
            if entry["kind"] not in schemas:
                schemas[entry["kind"]] = pq.read_schema(build_dir / entry["file"]).remove_metadata()
    return schemas


def write_vocabulary_copy(build_dir: Path, manifest: dict, target: Path) -> LocalFile:
    """vocabulary.tsv as a Parquet table with the columns and types of the TSV."""
    vocabulary = read_vocabulary(build_dir / manifest["vocabulary"]["file"])
    table = pa.table(
        [
            pa.array(range(vocabulary.size), pa.int64()),
            vocabulary.token_array,
            pa.array(vocabulary.count_array, pa.int64()),
            vocabulary.kind_array,
        ],
        schema=pa.schema(list(VOCABULARY_COLUMNS.items())),
    )
    write_table(target, table)
    return LocalFile(target.relative_to(build_dir).as_posix(), file_sha256(target), target.stat().st_size)


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Write the Croissant (JSON-LD) description of a build beside its manifest.")
    layout = run.layout
    build_dir = Path(layout.root)
    manifest = read_json(layout.manifest)
    vocabulary_copy = write_vocabulary_copy(build_dir, manifest, Path(layout.vocabulary_parquet))
    vocabulary = manifest["vocabulary"]
    sizes = {vocabulary["file"]: (build_dir / vocabulary["file"]).stat().st_size}
    if "subword_model" in vocabulary:
        sizes[vocabulary["subword_model"]["file"]] = (build_dir / vocabulary["subword_model"]["file"]).stat().st_size
    write_json(layout.croissant, build_croissant(manifest, read_schemas(build_dir, manifest), sizes, vocabulary_copy))


if __name__ == "__main__":
    main()
