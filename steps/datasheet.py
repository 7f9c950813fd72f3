"""Datasheet: a short description of a build for people, following the questions of Gebru et al.,
"Datasheets for Datasets" (Communications of the ACM 64(12), 2021).

The build answers what it knows (sources and their sizes, what was dropped and why, files not
read, splits, vocabulary, duplicates, and the near-duplicate and contamination figures when the
manifest has them); the questions only the dataset's maintainers can answer (purpose, funding,
consent, sensitive content, maintenance, …) are left as marked blanks. Everything comes from the
manifest and, when given, stats/coverage.json, so identical builds give identical bytes.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable

from . import job
from .croissant import dataset_name, license_url
from .formats import KINDS
from .layout import SPLITS
from .settings import read_json
from .storage import write_text

RULE = "datasheet"
SECTIONS = ()  # the manifest holds the resolved configuration

BLANK = "**To be answered by the dataset's maintainers.**"
# Files named one by one in a list or table (the manifest lists them all), so that a datasheet
# stays short for a corpus of many files.
LISTED_FILES = 20
# Manifest keys whose figures the datasheet shows as known caveats when a build records them.
CAVEAT_KEYS = ("near_duplicates", "contamination")

Answer = Callable[[dict, dict | None], str]


def _number(value: int | float) -> str:
    return f"{value:,}" if isinstance(value, int) else f"{value:.4g}"


def _percent(rate: float) -> str:
    return f"{100 * rate:.2f} %"


def _code(text: str, cell: bool = False) -> str:
    """`text` as a Markdown code span: non-printable characters escaped, a backtick fence longer
    than any run of backticks in the text, and in a table `cell` pipes escaped (GFM tables read
    a pipe as the end of a cell even inside a code span)."""
    shown = "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in text)
    shown = shown.replace("|", "\\|") if cell else shown
    fence = "`" * (max(map(len, re.findall("`+", shown)), default=0) + 1)
    pad = " " if shown.startswith("`") or shown.endswith("`") else ""
    return f"{fence}{pad}{shown}{pad}{fence}"


def _table(header: list[str], rows: list[list[str]]) -> str:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join(" --- " for _ in header) + "|"]
    lines += ["| " + " | ".join(row) + " |" for row in rows]
    return "\n".join(lines)


def _metadata(manifest: dict) -> dict:
    return manifest["config"].get("metadata", {})


def _kinds(manifest: dict) -> list[str]:
    present = {entry["kind"] for split in manifest["splits"].values() for entry in split["shards"]}
    return [kind for kind in KINDS if kind in present]


def _reason_meanings(config: dict) -> dict[str, str]:
    clean, corpus = config["clean"], config["corpus"]
    return {
        "invalid_utf8": "bytes that are not UTF-8 (corpus.invalid_utf8: drop)",
        "oversize": f"longer than corpus.max_document_bytes = {corpus['max_document_bytes']:,} bytes (corpus.oversize: drop)",
        "bad_json": "a .jsonl line that is not a JSON object (corpus.bad_records: drop)",
        "no_text": "a .jsonl record without a string text field (corpus.bad_records: drop)",
        "empty": "nothing left after cleaning",
        "too_short": f"fewer than clean.min_letters = {clean['min_letters']} letters",
        "few_letters": f"letters below clean.min_letter_share = {clean['min_letter_share']} of its non-space characters",
        "no_tokens": "no token after segmentation",
        "duplicate": "the same cleaned text as an earlier document (split.deduplicate)",
    }


# Motivation.


def _creators(manifest: dict, _: dict | None) -> str:
    creators = _metadata(manifest).get("creators") or []
    if not creators:
        return BLANK + " (metadata.creators is empty.)"
    return "\n".join(f"- {entry['name']} ({entry.get('type', 'person')})" for entry in creators)


# Composition.


def _instances(manifest: dict, _: dict | None) -> str:
    windows = manifest["config"]["windows"]
    meaning = {
        "ngram": f"`ngram`: {windows['ngram']['n'] - 1} context ids (`context`) and the id that follows (`target`)",
        "block": f"`block`: {windows['blocks']['length'] + 1} consecutive ids (`ids`; inputs ids[:-1], targets ids[1:])",
        "stream": "`stream`: one document's whole id stream (`doc_id`, `ids`)",
    }
    lines = [
        f"Rows of token ids cut from text documents, one row kind per Parquet shard; ids map to tokens in "
        f"{_code(manifest['vocabulary']['file'])}. Row kinds in this build:",
        "",
    ]
    return "\n".join(lines + [f"- {meaning[kind]}" for kind in _kinds(manifest)])


def _counts(manifest: dict, _: dict | None) -> str:
    kinds = _kinds(manifest)
    rows = []
    for split in SPLITS:
        figures = manifest["splits"].get(split)
        if figures is None:
            continue
        rows.append(
            [split, _number(figures["documents"]), _number(figures["sentences"]), _number(figures["tokens"])]
            + [_number(figures["rows"].get(kind, 0)) for kind in kinds]
            + [_number(len(figures["shards"])), _number(sum(entry["bytes"] for entry in figures["shards"]))]
        )
    header = ["split", "documents", "sentences", "tokens"] + [f"{kind} rows" for kind in kinds] + ["shard files", "shard bytes"]
    return _table(header, rows)


def _sample(manifest: dict, _: dict | None) -> str:
    totals = manifest["accounting"]
    not_read = manifest["not_read"]
    lines = [
        f"The build holds every document read from the {len(manifest['inputs']):,} selected input files "
        f"({totals['read']:,} read, {totals['kept']:,} kept), less those dropped (see Preprocessing).",
        "",
        f"Files under the corpus folder not read: {len(not_read['unselected']):,} matched by no corpus.include pattern, "
        f"{len(not_read['excluded']):,} removed by a corpus.exclude pattern, {len(not_read['refused']):,} refused.",
    ]
    named = [(path, "unselected") for path in not_read["unselected"]] + [(path, "excluded") for path in not_read["excluded"]]
    named += [(entry["path"], "refused: " + entry["reason"]) for entry in not_read["refused"]]
    if named:
        lines += ["", *(f"- {_code(path)}: {why}" for path, why in named[:LISTED_FILES])]
        lines += _more(len(named), "key `not_read`")
    lines += ["", "Whether the corpus folder is itself a sample of a larger set: " + BLANK]
    return "\n".join(lines)


def _targets(manifest: dict, _: dict | None) -> str:
    return "The next token is the target: the `target` column of ngram rows, ids[1:] of block rows, and each next id of a stream. There are no other labels."


def _missing(manifest: dict, coverage: dict | None) -> str:
    if manifest["config"]["units"] == "subword":
        lines = [
            "Text the subword model cannot spell is "
            + (
                "encoded as UTF-8 byte pieces, so nothing is lost."
                if manifest["config"]["subword"]["byte_fallback"]
                else "replaced by `<unk>`, so it is not recoverable from the ids."
            )
        ]
    else:
        lines = ["Words outside the vocabulary are replaced by an unknown-class id (`<unk>` or a shape class), so their text is not recoverable from the ids."]
    if coverage is not None:
        rates = [f"{split} {_percent(coverage['splits'][split]['unknown_rate'])}" for split in SPLITS if split in coverage.get("splits", {})]
        if rates:
            lines.append(f"Share of tokens replaced (out-of-vocabulary rate): {', '.join(rates)}.")
    return " ".join(lines)


def _splits(manifest: dict, _: dict | None) -> str:
    split = manifest["config"]["split"]
    fractions = ", ".join(f"{name} {split['fractions'][name]:g}" for name in SPLITS if name in split["fractions"])
    key = "its cleaned text (exact duplicates land together)" if split["key"] == "content" else "its document id"
    return (
        f"Yes: train, dev and test, drawn per document by a salted hash of {key}, with shares {fractions} "
        f"(salt {_code(split['salt'])}). The vocabulary is chosen on train only. Figures per split are in the table above."
    )


def _noise(manifest: dict, _: dict | None) -> str:
    dropped = manifest["accounting"]["dropped"]
    if manifest["config"]["split"]["deduplicate"]:
        lines = [f"- Exact duplicates (same cleaned text) were removed: {dropped.get('duplicate', 0):,} documents."]
    else:
        lines = ["- Exact duplicates were kept (split.deduplicate: false)."]
    for key in CAVEAT_KEYS:
        label = key.replace("_", "-").capitalize()
        if key in manifest:
            lines += [f"- {label}, as the build recorded them:", *("  " + line for line in _figures(manifest[key], key))]
        else:
            lines.append(f"- {label}: not measured by this build.")
    lines += ["", "Other known errors or noise in the source text: " + BLANK]
    return "\n".join(lines)


def _figures(value: object, path: str) -> list[str]:
    """Every number or text under `value` as one bullet, named by its key path."""
    if isinstance(value, dict):
        return [line for key in sorted(value) for line in _figures(value[key], f"{path}.{key}")]
    if isinstance(value, list):
        return [line for index, item in enumerate(value) for line in _figures(item, f"{path}[{index}]")]
    shown = _number(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else json.dumps(value, ensure_ascii=False)
    return [f"- `{path}`: {shown}"]


def _self_contained(manifest: dict, _: dict | None) -> str:
    return (
        "Yes for training: the shards and the vocabulary file are all a reader needs. The source text is not "
        "included; manifest.json fingerprints every input file (SHA-256)."
    )


# Collection process.


def _acquired(manifest: dict, _: dict | None) -> str:
    corpus = manifest["config"]["corpus"]
    files = manifest["accounting"].get("files", {})
    inputs = manifest["inputs"]
    rows = []
    for entry in sorted(inputs, key=lambda entry: (-entry["bytes"], entry["path"]))[:LISTED_FILES]:
        tally = files.get(entry["path"], {})
        rows.append(
            [
                _code(entry["path"], cell=True),
                _number(entry["bytes"]),
                _number(tally.get("read", 0)),
                _number(tally.get("kept", 0)),
                _code(entry["sha256"][:16], cell=True),
            ]
        )
    lines = [
        f"Read from the files under the corpus folder selected by corpus.include {_code(json.dumps(corpus['include']))} "
        f"less corpus.exclude {_code(json.dumps(corpus['exclude']))}; a .txt document is one {corpus['text_unit']}, "
        f"a .jsonl document one record's {_code(corpus['jsonl_text_field'])} field. Sources: {len(inputs):,} files, "
        f"{sum(entry['bytes'] for entry in inputs):,} bytes; the largest:",
        "",
        _table(["file", "bytes", "documents read", "kept", "SHA-256 (first 16)"], rows),
        *_more(len(inputs), "keys inputs and accounting.files"),
        "",
        "Where the source text itself came from: " + BLANK,
    ]
    return "\n".join(lines)


def _more(count: int, where: str) -> list[str]:
    """The line under a list cut at LISTED_FILES saying how many more the manifest holds."""
    return ["", f"… and {count - LISTED_FILES:,} more (manifest.json, {where})."] if count > LISTED_FILES else []


# Preprocessing.


def _preprocessing(manifest: dict, _: dict | None) -> str:
    config = manifest["config"]
    clean, segment = config["clean"], config["segment"]
    totals = manifest["accounting"]
    meanings = _reason_meanings(config)
    steps = [
        f"Unicode normalization {clean['normalization']}; lowercase: {str(clean['lowercase']).lower()}; digits: {clean['digits']}.",
        f"Sentences: {segment['sentences']}; words: {segment['words']}; units: {config['units']}.",
        f"Documents dropped by reason ({sum(totals['dropped'].values()):,} of {totals['read'] + totals['pieces_added']:,}):",
    ]
    reasons = sorted(totals["dropped"].items())
    table = _table(["reason", "documents", "meaning"], [[_code(r, cell=True), _number(n), meanings.get(r, "")] for r, n in reasons])
    losing = [(path, tally) for path, tally in totals.get("files", {}).items() if tally["dropped"]]
    losing.sort(key=lambda item: (-sum(item[1]["dropped"].values()), item[0]))
    per_file = [
        [_code(path, cell=True), _number(tally["read"]), _number(tally["kept"]),
         ", ".join(f"{reason} {count:,}" for reason, count in sorted(tally["dropped"].items()))]
        for path, tally in losing[:LISTED_FILES]
    ]  # fmt: skip
    lines = [f"- {step}" for step in steps] + ["", table if reasons else "No document was dropped."]
    if losing:
        lines += ["", f"Input files that lost documents ({len(losing):,} of {len(totals.get('files', {})):,}), most first:", ""]
        lines += [_table(["file", "read", "kept", "dropped"], per_file), *_more(len(losing), "key accounting.files")]
    if totals.get("truncated") or totals.get("replaced_sequences") or totals.get("pieces_added"):
        lines += [
            "",
            f"Documents split into pieces: {totals.get('pieces_added', 0):,} pieces added; truncated: "
            f"{totals.get('truncated', 0):,}; invalid UTF-8 sequences replaced: {totals.get('replaced_sequences', 0):,}.",
        ]
    return "\n".join(lines)


def _vocabulary(manifest: dict, coverage: dict | None) -> str:
    config, vocabulary = manifest["config"], manifest["vocabulary"]
    ids = f"{vocabulary['size']:,} ids: {len(vocabulary.get('reserved', {})):,} reserved or unknown-class symbols and {vocabulary.get('words', 0):,} tokens"
    if config["units"] == "subword":
        subword = config["subword"]
        how = (
            f"the pieces of the sentencepiece model reused unchanged from {_code(str(subword['frozen']))}"
            if subword.get("frozen")
            else f"the pieces of a sentencepiece {subword['model_type']} model learned on at most {subword['max_sentences']:,} "
            f"train sentences (character_coverage {subword['character_coverage']})"
        )
        lines = [f"{ids}: {how}; characters outside it are " + ("UTF-8 byte pieces." if subword["byte_fallback"] else "<unk>.")]
    else:
        cutoff = config["vocabulary"]
        limits = ", ".join(f"{key} {cutoff[key]}" for key in ("min_count", "max_size", "coverage") if cutoff[key] is not None)
        how = f"reused unchanged from {_code(str(cutoff['frozen']))}" if cutoff.get("frozen") else f"chosen on train ({limits or 'no limit'})"
        lines = [f"{ids}, {how}; out-of-vocabulary words map to " + ("shape classes." if cutoff["unknown"] == "shape" else "<unk>.")]
    if coverage is not None:
        chosen_size = next((row for row in coverage.get("sizes", []) if row.get("chosen")), None)
        if chosen_size is not None:
            lines.append(f"It covers {_percent(chosen_size['train_coverage'])} of train tokens.")
    return " ".join(lines)


def _raw_kept(manifest: dict, _: dict | None) -> str:
    return "The build does not copy the raw text; it records each input's size and SHA-256 in manifest.json. Whether the raw text is kept, and where: " + BLANK


def _software(manifest: dict, _: dict | None) -> str:
    return (
        f"Built by corpusmill; the full configuration is in manifest.json (key `config`, SHA-256 "
        f"{_code(manifest['config_sha256'][:16])}…), so the build can be repeated from the same inputs."
    )


# Uses.


def _tasks(manifest: dict, _: dict | None) -> str:
    return f"Made for training and evaluating language models ({', '.join(_kinds(manifest))} rows). Other tasks: " + BLANK


def _impact(manifest: dict, coverage: dict | None) -> str:
    clean = manifest["config"]["clean"]
    notes = [
        "Out-of-vocabulary text is merged into unknown ids (see Composition)",
        f"text was normalized ({clean['normalization']}"
        + (", lowercased" if clean["lowercase"] else "")
        + (", digits replaced by 0" if clean["digits"] == "zero" else "")
        + ")",
    ]
    return "; ".join(notes) + ". Anything else about the source text: " + BLANK


# Distribution.


def _how(manifest: dict, _: dict | None) -> str:
    metadata = _metadata(manifest)
    files = sum(len(split["shards"]) for split in manifest["splits"].values())
    where = f" Web page: {metadata['url']}." if metadata.get("url") else ""
    return (
        f"As files: {files:,} Parquet shards under `shards/`, {_code(manifest['vocabulary']['file'])}, manifest.json "
        f"(every file with its SHA-256) and croissant.json (MLCommons Croissant metadata).{where} Hosting and DOI: " + BLANK
    )


def _when(manifest: dict, _: dict | None) -> str:
    date = _metadata(manifest).get("date_published")
    return f"Published {date} (metadata.date_published)." if date else BLANK + " (metadata.date_published is not set.)"


def _license(manifest: dict, _: dict | None) -> str:
    license = _metadata(manifest).get("license")
    if not license:
        return BLANK + " (metadata.license is not set.) The license of the source text decides what is allowed."
    return f"{license} ({license_url(license)})."


# Maintenance.


def _contact(manifest: dict, _: dict | None) -> str:
    contacts = [
        f"- {entry['name']}: " + ", ".join(entry[key] for key in ("email", "url") if entry.get(key))
        for entry in _metadata(manifest).get("creators") or []
        if entry.get("email") or entry.get("url")
    ]
    return "\n".join(contacts) if contacts else BLANK


def _updates(manifest: dict, _: dict | None) -> str:
    return (
        "Rebuilding after the corpus changes gives byte-identical files where nothing changed; compare the "
        "manifests (inputs_sha256, config_sha256, every shard's SHA-256) to see what did. Update plans: " + BLANK
    )


QUESTIONS: tuple[tuple[str, tuple[tuple[str, Answer | None], ...]], ...] = (
    ("Motivation", (
        ("For what purpose was the dataset created?", None),
        ("Who created the dataset and on behalf of which entity?", _creators),
        ("Who funded the creation of the dataset?", None),
    )),
    ("Composition", (
        ("What do the instances that comprise the dataset represent?", _instances),
        ("How many instances are there in total?", _counts),
        ("Does the dataset contain all possible instances or is it a sample of instances from a larger set?", _sample),
        ("Is there a label or target associated with each instance?", _targets),
        ("Is any information missing from individual instances?", _missing),
        ("Are there recommended data splits?", _splits),
        ("Are there any errors, sources of noise, or redundancies in the dataset?", _noise),
        ("Is the dataset self-contained, or does it link to or otherwise rely on external resources?", _self_contained),
        ("Does the dataset contain data that might be considered confidential?", None),
        ("Does the dataset contain data that, if viewed directly, might be offensive, insulting, threatening, or might "
         "otherwise cause anxiety?", None),
        ("Is it possible to identify individuals, either directly or indirectly, from the dataset?", None),
        ("Does the dataset contain data that might be considered sensitive in any way?", None),
    )),
    ("Collection process", (
        ("How was the data associated with each instance acquired?", _acquired),
        ("Who was involved in the data collection process and how were they compensated?", None),
        ("Over what timeframe was the data collected?", None),
        ("Were any ethical review processes conducted?", None),
        ("Were the individuals in question notified about the data collection, and did they consent?", None),
    )),
    ("Preprocessing, cleaning, labeling", (
        ("Was any preprocessing, cleaning or labeling of the data done?", _preprocessing),
        ("How was the vocabulary chosen?", _vocabulary),
        ("Was the raw data saved in addition to the preprocessed data?", _raw_kept),
        ("Is the software that was used to preprocess the data available?", _software),
    )),
    ("Uses", (
        ("Has the dataset been used for any tasks already?", None),
        ("What (other) tasks could the dataset be used for?", _tasks),
        ("Is there anything about the composition of the dataset or the way it was collected and preprocessed that "
         "might impact future uses?", _impact),
        ("Are there tasks for which the dataset should not be used?", None),
    )),
    ("Distribution", (
        ("Will the dataset be distributed to third parties outside of the entity on behalf of which it was created?", None),
        ("How will the dataset be distributed?", _how),
        ("When will the dataset be distributed?", _when),
        ("Will the dataset be distributed under a copyright or other intellectual property license, and/or under "
         "applicable terms of use?", _license),
        ("Have any third parties imposed restrictions on the data associated with the instances?", None),
    )),
    ("Maintenance", (
        ("Who will be supporting, hosting, maintaining the dataset?", None),
        ("How can the owner, curator or manager of the dataset be contacted?", _contact),
        ("Will the dataset be updated?", _updates),
        ("Will older versions of the dataset continue to be supported, hosted, maintained?", None),
        ("If others want to extend, augment, build on or contribute to the dataset, is there a mechanism for them to do so?", None),
    )),
)  # fmt: skip


def _header(manifest: dict) -> list[str]:
    metadata = _metadata(manifest)
    lines = [f"# Datasheet: {dataset_name(manifest)}", ""]
    lines.append(metadata["description"] if metadata.get("description") else "Description: " + BLANK + " (metadata.description)")
    lines += [
        "",
        'This datasheet follows the questions of Gebru et al., "Datasheets for Datasets" (Communications of the ACM '
        "64(12), 2021). The build answered what it knows; the other answers are left to the dataset's maintainers.",
        "",
        f"- Version: {metadata.get('version') or BLANK}",
        f"- License: {metadata.get('license') or BLANK}",
        f"- Web page: {metadata.get('url') or BLANK}",
        f"- Built from: manifest.json, inputs SHA-256 {_code(manifest['inputs_sha256'][:16])}…, configuration SHA-256 {_code(manifest['config_sha256'][:16])}…",
    ]
    if metadata.get("citation"):
        fence = "~" * max(3, max(map(len, re.findall("~+", metadata["citation"])), default=0) + 1)
        lines += ["", "Cite as:", "", fence, metadata["citation"], fence]
    else:
        lines.append(f"- Cite as: {BLANK}")
    return lines


def build_datasheet(manifest: dict, coverage: dict | None = None) -> str:
    """The datasheet of a build as Markdown, from its manifest and (optional) stats/coverage.json."""
    lines = _header(manifest)
    for section, questions in QUESTIONS:
        lines += ["", f"## {section}"]
        for question, answer in questions:
            lines += ["", f"### {question}", "", answer(manifest, coverage) if answer else BLANK]
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> None:
    layout = job.start(argv, RULE, "Write the datasheet (Markdown) of a build.").layout
    write_text(layout.datasheet, build_datasheet(read_json(layout.manifest), read_json(layout.coverage)))


if __name__ == "__main__":
    main()
