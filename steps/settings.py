"""Configuration: validation against the JSON schema, defaults, and the checks a schema cannot say.

The Snakefile calls `resolve` before building the DAG, so a bad value stops the run before any
job with a message naming the field, the value and what is allowed.
"""

from __future__ import annotations

import copy
import hashlib
import json
import math
from pathlib import Path, PurePosixPath
from typing import Any

import jsonschema
import regex

SCHEMA_PATH = Path(__file__).resolve().parent.parent / "workflow_config" / "config.schema.json"


class ConfigError(ValueError):
    """A configuration value the workflow cannot run with."""


# A configuration is a few hundred values; YAML anchors and aliases can make a file of a few
# hundred bytes stand for billions (an "alias bomb"), which expanding would exhaust memory.
MAX_CONFIG_VALUES = 100_000
# build_dir reaches shell commands, Snakemake's path patterns (where { } are wildcards and
# <name> a path variable) and libraries that read ~ or a scheme: so letters and digits of any
# script, spaces and a few marks only, and no leading '-' (it would read as an option).
_SAFE_BUILD_DIR = regex.compile(r"[\p{L}\p{M}\p{N} ._+@,=/-]+", regex.V1)


def load_schema() -> dict[str, Any]:
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


def _unshared(value: Any) -> Any:
    """A deep copy in which no two places share one object (YAML anchors and aliases make
    shared mappings, and filling defaults into one must not fill the others)."""
    if isinstance(value, dict):
        return {key: _unshared(item) for key, item in value.items()}
    if isinstance(value, list):
        return [_unshared(item) for item in value]
    return value


def _fill_defaults(instance: dict[str, Any], schema: dict[str, Any]) -> None:
    """Insert schema defaults for missing keys, descending into objects."""
    for key, sub in schema.get("properties", {}).items():
        if key not in instance and "default" in sub:
            instance[key] = copy.deepcopy(sub["default"])
        if isinstance(instance.get(key), dict) and sub.get("type") == "object":
            _fill_defaults(instance[key], sub)


def _allowed(error: jsonschema.ValidationError) -> str:
    """Say in words what the failing schema part allows."""
    sub = error.schema
    if error.validator == "additionalProperties":
        return "known keys: " + ", ".join(sorted(sub.get("properties", {})))
    if "enum" in sub:
        return "one of " + ", ".join(json.dumps(v) for v in sub["enum"])
    parts = []
    if "type" in sub:
        types = sub["type"] if isinstance(sub["type"], list) else [sub["type"]]
        parts.append("type " + " or ".join(types))
    for word, symbol in (("minimum", ">="), ("exclusiveMinimum", ">"), ("maximum", "<="), ("exclusiveMaximum", "<")):
        if word in sub:
            parts.append(f"{symbol} {sub[word]}")
    if "minItems" in sub:
        parts.append(f"at least {sub['minItems']} item(s)")
    if "minLength" in sub:
        parts.append("non-empty")
    if "pattern" in sub:
        parts.append(f"matching {sub['pattern']}")
    if "required" in sub:
        parts.append("keys " + ", ".join(sub["required"]))
    return ", ".join(parts) or error.message


def _field(path: Any) -> str:
    return ".".join(str(p) for p in path) or "(top level)"


def _expanded_size(value: Any, limit: int) -> int:
    """How many values `value` holds once every shared (aliased) part is counted where it is
    used, without expanding anything; stops counting past `limit`."""
    sizes: dict[int, int] = {}

    def size(item: Any) -> int:
        if not isinstance(item, (dict, list)):
            return 1
        known = sizes.get(id(item))
        if known is None:
            sizes[id(item)] = limit + 1  # a container that holds itself is over any limit
            children = item.values() if isinstance(item, dict) else item
            total = 1
            for child in children:
                total = min(total + size(child), limit + 1)
                if total > limit:
                    break
            sizes[id(item)] = known = total
        return known

    return size(value)


def _check_finite(value: Any, path: tuple[str, ...] = ()) -> None:
    """Refuse .inf and .nan anywhere: they pass every minimum and maximum of a schema."""
    if isinstance(value, float) and not math.isfinite(value):
        raise ConfigError(f"invalid configuration: {_field(path)} = {value}: allowed: a finite number")
    children = value.items() if isinstance(value, dict) else enumerate(value) if isinstance(value, list) else ()
    for key, child in children:
        _check_finite(child, (*path, str(key)))


def _check_build_dir(value: str) -> None:
    path = PurePosixPath(value)
    if path.is_absolute() or ".." in path.parts or not _SAFE_BUILD_DIR.fullmatch(value) or value.startswith("-"):
        raise ConfigError(
            f"invalid configuration: build_dir = {json.dumps(value, ensure_ascii=False)}: allowed: a relative path without "
            "'..' of letters, digits, spaces and . _ - + @ , = / (not starting with '-'); outputs never leave the "
            "working directory, and the name reaches shell commands and path patterns"
        )


def resolve(raw: dict[str, Any]) -> dict[str, Any]:
    """Return the validated configuration with every default filled in; raise ConfigError."""
    if _expanded_size(raw, MAX_CONFIG_VALUES) > MAX_CONFIG_VALUES:
        raise ConfigError(
            f"invalid configuration: more than {MAX_CONFIG_VALUES:,} values once YAML aliases (*name) are expanded; "
            "a corpusmill configuration holds a few hundred: remove the aliases or the unknown keys that hold them"
        )
    _check_finite(raw)
    config = _unshared(dict(raw))
    # YAML 1.1 (PyYAML, Snakemake) reads an unquoted `off` as false: `policy: off` means "off".
    near = config.get("near_duplicates")
    if isinstance(near, dict) and near.get("policy") is False:
        near["policy"] = "off"
    schema = load_schema()
    _fill_defaults(config, schema)
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(config), key=lambda e: list(map(str, e.absolute_path)))
    if errors:
        lines = []
        for error in errors:
            if error.validator == "additionalProperties":
                extra = sorted(set(error.instance) - set(error.schema.get("properties", {})))
                field = ".".join([*map(str, error.absolute_path), ",".join(extra)])
                lines.append(f"  {field}: unknown key; {_allowed(error)}")
            else:
                # A value JSON cannot show (e.g. an unquoted YAML date) is shown with its type.
                shown = json.dumps(error.instance, default=lambda value: f"{value} (a YAML {type(value).__name__}; quote it)")
                lines.append(f"  {_field(error.absolute_path)} = {shown}: allowed: {_allowed(error)}")
        raise ConfigError("invalid configuration:\n" + "\n".join(lines))
    fractions = config["split"]["fractions"]
    total = sum(fractions.values())
    if abs(total - 1.0) > 1e-9:
        raise ConfigError(f"invalid configuration: split.fractions = {json.dumps(fractions)} sum to {total:g}: allowed: shares summing to 1")
    if fractions["train"] <= 0:
        raise ConfigError("invalid configuration: split.fractions.train = 0: allowed: a share > 0 (the vocabulary is counted on train)")
    _check_build_dir(config["build_dir"])
    near = config["near_duplicates"]
    if near["permutations"] % near["bands"]:
        raise ConfigError(
            f"invalid configuration: near_duplicates.bands = {near['bands']} does not divide near_duplicates.permutations = "
            f"{near['permutations']}: allowed: a divisor, e.g. 16 bands of 8 for 128 permutations"
        )

    blocks = config["windows"]["blocks"]
    if blocks["stride"] > blocks["length"] + 1:
        raise ConfigError(
            f"invalid configuration: windows.blocks.stride = {blocks['stride']}: allowed: <= length + 1 = {blocks['length'] + 1} "
            "(a larger stride would skip ids)"
        )
    if not any(config["windows"][kind]["enabled"] for kind in ("ngram", "blocks", "streams")):
        raise ConfigError("invalid configuration: windows: allowed: at least one of ngram, blocks, streams enabled")
    if config["baseline"]["enabled"] and not config["windows"]["streams"]["enabled"]:
        raise ConfigError(
            "invalid configuration: baseline.enabled = true needs windows.streams.enabled = true (the baseline counts the "
            "document streams): enable the streams, or set baseline.enabled: false"
        )
    return config


def digest(value: Any) -> str:
    """SHA-256 of a JSON value in canonical form (sorted keys, no spaces)."""
    text = json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def read_json(path: str | Path) -> Any:
    return json.loads(Path(path).read_text(encoding="utf-8"))
