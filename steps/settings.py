"""Configuration: validation against the JSON schema, defaults, and the checks a schema cannot say.

The Snakefile calls `resolve` before building the DAG, so a bad value stops the run before any
job with a message naming the field, the value and what is allowed.
"""

from __future__ import annotations

import copy
import hashlib
import json
from pathlib import Path, PurePosixPath
from typing import Any

import jsonschema

SCHEMA_PATH = Path(__file__).resolve().parent.parent / "workflow_config" / "config.schema.json"


class ConfigError(ValueError):
    """A configuration value the workflow cannot run with."""


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


def _check_relative(field: str, value: str) -> None:
    path = PurePosixPath(value.replace("\\", "/"))
    if path.is_absolute() or ".." in path.parts:
        raise ConfigError(
            f"invalid configuration: {field} = {value!r}: must be a relative path without '..' "
            "(outputs never leave the working directory)"
        )


def resolve(raw: dict[str, Any]) -> dict[str, Any]:
    """Return the validated configuration with every default filled in; raise ConfigError."""
    config = _unshared(dict(raw))
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
                lines.append(f"  {_field(error.absolute_path)} = {json.dumps(error.instance)}: allowed: {_allowed(error)}")
        raise ConfigError("invalid configuration:\n" + "\n".join(lines))
    fractions = config["split"]["fractions"]
    total = sum(fractions.values())
    if abs(total - 1.0) > 1e-9:
        raise ConfigError(
            f"invalid configuration: split.fractions = {json.dumps(fractions)} sum to {total:g}: allowed: shares summing to 1"
        )
    if fractions["train"] <= 0:
        raise ConfigError("invalid configuration: split.fractions.train = 0: allowed: a share > 0 (the vocabulary is counted on train)")
    _check_relative("build_dir", config["build_dir"])
    blocks = config["windows"]["blocks"]
    if blocks["stride"] > blocks["length"] + 1:
        raise ConfigError(
            f"invalid configuration: windows.blocks.stride = {blocks['stride']}: allowed: <= length + 1 = {blocks['length'] + 1} "
            "(a larger stride would skip ids)"
        )
    if not any(config["windows"][kind]["enabled"] for kind in ("ngram", "blocks", "streams")):
        raise ConfigError("invalid configuration: windows: allowed: at least one of ngram, blocks, streams enabled")
    return config


def digest(value: Any) -> str:
    """SHA-256 of a JSON value in canonical form (sorted keys, no spaces)."""
    text = json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def read_json(path: str | Path) -> Any:
    return json.loads(Path(path).read_text(encoding="utf-8"))
