"""croissant.json: the build described in MLCommons Croissant 1.1, checked against MLCommons' own
reader (mlcroissant, PyPI): it loads without errors or unexplained warnings, and every record set
it loads equals what pyarrow reads from the same files. Checksums are recounted with hashlib and
glob patterns matched with Python's fnmatch (the matcher mlcroissant uses for FileSet includes)."""

from __future__ import annotations

import fnmatch
import hashlib
import json
import logging
import shutil
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import yaml

from conftest import run_workflow, scenario
from corpusmill import croissant
from corpusmill.formats import read_vocabulary
from corpusmill.settings import ConfigError, resolve

mlc = pytest.importorskip("mlcroissant")

# mlcroissant itself calls an rdflib class and a pandas keyword that their authors deprecated.
pytestmark = [
    pytest.mark.filterwarnings("ignore:ConjunctiveGraph is deprecated"),
    pytest.mark.filterwarnings("ignore:The inplace keyword in DataFrame.reset_index"),
]

FILLED_METADATA = {
    "name": "harbour-town",
    "description": "Letters, logs and minutes of a harbour town, for training small language models.",
    "license": "CC-BY-4.0",
    "citation": "@misc{harbour, title = {Harbour town}, year = {2024}}",
    "url": "https://example.org/harbour",
    "version": "1.0.0",
    "date_published": "2024-05-01",
    "creators": [
        {"name": "Ada Lovelace", "email": "ada@example.org"},
        {"name": "Harbour Archive", "type": "organization", "url": "https://example.org/archive"},
    ],
}
# mlcroissant's warnings for the recommended properties a user fills in through the metadata
# section; with its defaults (null) these four, and only these, are expected.
BLANK_METADATA_WARNINGS = {
    'Property "http://mlcommons.org/croissant/citeAs" is recommended, but does not exist.',
    'Property "https://schema.org/datePublished" is recommended, but does not exist.',
    'Property "https://schema.org/license" is recommended, but does not exist.',
    'Property "https://schema.org/version" is recommended, but does not exist.',
}


@pytest.fixture(scope="module")
def build(demo_build: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A copy of the demo build, whose croissant.json the workflow wrote (the shared build stays as it is)."""
    target = tmp_path_factory.mktemp("croissant") / "build"
    shutil.copytree(demo_build, target, ignore=shutil.ignore_patterns("logs"))
    return target


def load(path: Path, caplog: pytest.LogCaptureFixture) -> mlc.Dataset:
    """The dataset as mlcroissant reads it; fails on any log line about a non-standard @context."""
    with caplog.at_level(logging.WARNING):
        dataset = mlc.Dataset(path)
    assert not [r for r in caplog.records if "@context" in r.getMessage()], caplog.text
    return dataset


def warnings_of(dataset: mlc.Dataset) -> set[str]:
    """mlcroissant's warnings without the node prefix it adds ("[Metadata(name)] …")."""
    return {warning.split("] ", 1)[-1] for warning in dataset.metadata.issues.warnings}


def plain(value: object) -> object:
    """A value mlcroissant yields as Python data: numpy scalars as int, sc:Text (bytes) as str."""
    if isinstance(value, list):
        return [plain(item) for item in value]
    if isinstance(value, bytes):
        return value.decode("utf-8")
    return int(value) if hasattr(value, "item") else value


def manifest_of(build: Path) -> dict:
    return json.loads((build / "manifest.json").read_text(encoding="utf-8"))


def test_croissant_loads_with_only_the_warnings_of_the_blank_metadata_fields(build: Path, caplog: pytest.LogCaptureFixture) -> None:
    """With metadata left at its defaults, mlcroissant finds no error and warns only about the
    recommended properties the user has not filled in (citeAs, datePublished, license, version)."""
    dataset = load(build / "croissant.json", caplog)
    assert dataset.metadata.issues.errors == set()
    assert warnings_of(dataset) == BLANK_METADATA_WARNINGS
    assert dataset.metadata.name == "demo_raw"


def test_croissant_with_the_metadata_filled_in_loads_without_any_warning(build: Path, caplog: pytest.LogCaptureFixture) -> None:
    manifest = manifest_of(build)
    manifest["config"]["metadata"] = FILLED_METADATA
    document = croissant.build_croissant(
        manifest,
        croissant.read_schemas(build, manifest),
        {"vocabulary.tsv": (build / "vocabulary.tsv").stat().st_size},
        croissant.LocalFile(
            "vocabulary.parquet", hashlib.sha256((build / "vocabulary.parquet").read_bytes()).hexdigest(), (build / "vocabulary.parquet").stat().st_size
        ),
    )
    path = build / "filled.croissant.json"
    path.write_text(json.dumps(document), encoding="utf-8")
    dataset = load(path, caplog)
    assert dataset.metadata.issues.errors == set() and dataset.metadata.issues.warnings == set()
    described = dataset.metadata
    assert (described.name, described.url, described.version) == ("harbour-town", FILLED_METADATA["url"], "1.0.0")
    assert described.license == ["https://spdx.org/licenses/CC-BY-4.0.html"]
    assert described.cite_as == FILLED_METADATA["citation"]
    assert described.date_published.date().isoformat() == "2024-05-01"
    assert [(c.name, c.email, c.url) for c in described.creators] == [
        ("Ada Lovelace", "ada@example.org", None),
        ("Harbour Archive", None, "https://example.org/archive"),
    ]


def test_every_row_record_set_loaded_by_mlcroissant_equals_what_pyarrow_reads(build: Path, caplog: pytest.LogCaptureFixture) -> None:
    """One record set per kind and split; mlcroissant reads a FileSet's files in path order, so
    pyarrow reads the manifest's files of that split and kind in the same order."""
    dataset = load(build / "croissant.json", caplog)
    manifest = manifest_of(build)
    checked = set()
    for split, figures in manifest["splits"].items():
        for kind in figures["rows"]:
            name = f"{kind}-{split}"
            files = sorted(entry["file"] for entry in figures["shards"] if entry["kind"] == kind)
            expected = pa.concat_tables([pq.read_table(build / file) for file in files]).to_pylist()
            loaded = [{key.split("/", 1)[1]: plain(value) for key, value in record.items()} for record in dataset.records(name)]
            assert len(loaded) == figures["rows"][kind], name
            assert loaded == expected, name
            checked.add(name)
    assert checked == {f"{kind}-{split}" for kind in ("ngram", "block", "stream") for split in ("train", "dev", "test")}


def test_the_vocabulary_record_set_equals_vocabulary_tsv_even_for_tokens_csv_readers_mangle(build: Path, caplog: pytest.LogCaptureFixture) -> None:
    """Loaded through mlcroissant, the vocabulary equals vocabulary.tsv as corpusmill reads it (pyarrow's
    CSV reader, quoting off). The demo vocabulary holds the token `"`, which a CSV reader takes for
    a quote: the reason the record set reads the Parquet copy."""
    dataset = load(build / "croissant.json", caplog)
    vocabulary = read_vocabulary(build / "vocabulary.tsv")
    assert '"' in vocabulary.tokens
    loaded = [{key.split("/", 1)[1]: plain(value) for key, value in record.items()} for record in dataset.records("vocabulary")]
    expected = [
        {"id": i, "token": token, "count": count, "kind": kind}
        for i, (token, count, kind) in enumerate(zip(vocabulary.tokens, vocabulary.counts, vocabulary.kinds))
    ]
    assert loaded == expected


def test_the_distribution_lists_every_shard_and_the_vocabulary_with_checksum_and_size(build: Path) -> None:
    """Checksums and sizes recounted from the files with hashlib and stat; each split and kind's
    FileSet includes exactly its files, as fnmatch (mlcroissant's matcher) sees them."""
    document = json.loads((build / "croissant.json").read_text(encoding="utf-8"))
    objects = {item["@id"]: item for item in document["distribution"] if item["@type"] == "cr:FileObject"}
    sets = {item["@id"]: item for item in document["distribution"] if item["@type"] == "cr:FileSet"}
    manifest = manifest_of(build)
    every_file = [p.relative_to(build).as_posix() for p in build.rglob("*") if p.is_file()]
    shards = [entry for figures in manifest["splits"].values() for entry in figures["shards"]]
    for name in [entry["file"] for entry in shards] + ["vocabulary.tsv", "vocabulary.parquet"]:
        described = objects[name]
        data = (build / described["contentUrl"]).read_bytes()
        assert described["sha256"] == hashlib.sha256(data).hexdigest(), name
        assert described["contentSize"] == f"{len(data)} B", name
    assert objects["vocabulary.parquet"]["sameAs"] == "vocabulary.tsv"
    assert objects["vocabulary.tsv"]["encodingFormat"] == "text/tab-separated-values"
    assert {objects[entry["file"]]["encodingFormat"] for entry in shards} == {"application/x-parquet"}
    for split, figures in manifest["splits"].items():
        for kind in figures["rows"]:
            included = sets[f"{kind}-{split}-files"]["includes"]
            matched = {path for path in every_file if any(fnmatch.fnmatch(path, pattern) for pattern in included)}
            assert matched == {entry["file"] for entry in figures["shards"] if entry["kind"] == kind}


def test_fields_carry_the_parquet_types_and_the_fixed_lengths_of_the_row_kinds(build: Path, caplog: pytest.LogCaptureFixture) -> None:
    """ngram context holds n-1 ids, a block L+1 ids, a stream any number; ids are the shards' uint16
    (a vocabulary under 65,536 ids, shards.id_type auto); doc_id is text."""
    dataset = load(build / "croissant.json", caplog)
    windows = manifest_of(build)["config"]["windows"]
    fields = {field.id: field for record_set in dataset.metadata.record_sets for field in record_set.fields}
    uint16 = "http://mlcommons.org/croissant/UInt16"
    for split in ("train", "dev", "test"):
        shapes = {
            f"ngram-{split}/context": (windows["ngram"]["n"] - 1,), f"ngram-{split}/target": None,
            f"block-{split}/ids": (windows["blocks"]["length"] + 1,), f"stream-{split}/ids": (-1,),
        }  # fmt: skip
        for name, shape in shapes.items():
            assert (fields[name].array_shape_tuple, [str(t) for t in fields[name].data_types]) == (shape, [uint16]), name
        assert [str(t) for t in fields[f"stream-{split}/doc_id"].data_types] == ["https://schema.org/Text"]


def test_a_subword_build_lists_its_sentencepiece_model_and_still_loads_cleanly(build: Path) -> None:
    manifest = manifest_of(build)
    manifest["config"]["metadata"] = FILLED_METADATA
    manifest["vocabulary"]["subword_model"] = {"file": "subword.model", "sha256": "ab" * 32}
    sizes = {"vocabulary.tsv": 10, "subword.model": 12345}
    copy = croissant.LocalFile("v.parquet", "cd" * 32, 5)
    document = croissant.build_croissant(manifest, croissant.read_schemas(build, manifest), sizes, copy)
    model = next(item for item in document["distribution"] if item["@id"] == "subword.model")
    assert (model["encodingFormat"], model["contentSize"], model["sha256"]) == (croissant.SENTENCEPIECE, "12345 B", "ab" * 32)
    dataset = mlc.Dataset(document)
    assert dataset.metadata.issues.errors == set() and dataset.metadata.issues.warnings == set()


@pytest.mark.parametrize("path", ["shards/train/ngram-[0001].parquet", "shards/a*b?.parquet", "shards/plain.parquet"])
def test_a_fileset_pattern_matches_exactly_its_file_whatever_glob_characters_it_holds(path: str) -> None:
    """Python's fnmatch, which mlcroissant applies to FileSet includes, matches the escaped path
    and nothing that a raw pattern would also match."""
    pattern = croissant.glob_escape(path)
    assert fnmatch.fnmatchcase(path, pattern)
    for other in ("shards/train/ngram-0.parquet", "shards/train/ngram-1.parquet", "shards/aXbY.parquet", "shards/ab.parquet"):
        assert not fnmatch.fnmatchcase(other, pattern)


def test_an_unquoted_yaml_date_in_the_metadata_is_refused_naming_the_field_and_the_fix() -> None:
    """YAML reads 2024-05-01 without quotes as a date, which the JSON configuration cannot hold."""
    with pytest.raises(ConfigError) as refused:
        resolve(yaml.safe_load("metadata: {date_published: 2024-05-01}"))
    assert "metadata.date_published" in str(refused.value) and "quote it" in str(refused.value)
    assert resolve(yaml.safe_load("metadata: {date_published: '2024-05-01'}"))["metadata"]["date_published"] == "2024-05-01"


def test_croissant_and_datasheet_are_byte_identical_for_two_identical_builds(build: Path, tmp_path: Path) -> None:
    """A second build of the demo corpus in another folder: croissant.json, its vocabulary copy and
    datasheet.md hold no clock time and no absolute path, so they come out byte for byte the same."""
    run_workflow(tmp_path, scenario("demo"))
    builds = [build, tmp_path / "build"]
    for name in ("croissant.json", "vocabulary.parquet", "report/datasheet.md"):
        first, second = ((folder / name).read_bytes() for folder in builds)
        assert first == second, name


def test_the_metadata_defaults_claim_nothing_for_the_user_in_the_schema_and_in_config_yaml() -> None:
    blank = {key: None for key in FILLED_METADATA if key != "creators"} | {"creators": []}
    config_yaml = yaml.safe_load((Path(__file__).parent.parent / "workflow_config" / "config.yaml").read_text(encoding="utf-8"))
    assert resolve({})["metadata"] == blank == config_yaml["metadata"]
    assert resolve({"metadata": FILLED_METADATA})["metadata"] == FILLED_METADATA
