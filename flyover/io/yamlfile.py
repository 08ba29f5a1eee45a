"""YAML files checked against flyover's JSON schemas: a strict reader (no repeated keys, no
keys read as numbers or dates; anchors and the merge key allowed) and a validator whose errors
name the key, what was expected and what was found. The campaign file and the simulator's
scenario file both go through it."""

from __future__ import annotations

import datetime
import json
from functools import lru_cache
from pathlib import Path

import yaml
from jsonschema import Draft202012Validator

from flyover.model.errors import FlyoverInputError, suggest


@lru_cache(maxsize=None)
def read_schema(name: str) -> dict:
    """A JSON schema shipped with the package (``flyover/schema/<name>.schema.json``)."""
    path = Path(__file__).resolve().parent.parent / "schema" / f"{name}.schema.json"
    return json.loads(path.read_text(encoding="utf-8"))


class _YamlKeyError(yaml.YAMLError):
    def __init__(self, what: str, line: int, hint: str):
        super().__init__(what)
        self.what, self.line, self.hint = what, line, hint


class _StrictLoader(yaml.SafeLoader):
    """Safe YAML that refuses a key given twice (a pasted block would silently win) and keys
    that YAML reads as something other than text (a pass named 1 or 2026-05-14). Shared
    settings may come in through anchors and the merge key (``<<: *atm``): keys given beside
    a merge override the merged ones, as YAML says."""

    def construct_mapping(self, node, deep=False):
        seen = {}
        for key_node, _ in node.value:
            if key_node.tag == "tag:yaml.org,2002:merge":
                continue                   # merged keys may be overridden: not a repeat
            key = self.construct_object(key_node, deep=deep)
            line = key_node.start_mark.line + 1
            if not isinstance(key, str):
                raise _YamlKeyError(f"key {key_node.value!r} is read as a "
                                    f"{type(key).__name__}, not as a name", line,
                                    f"put it in quotes: '{key_node.value}'")
            if key in seen:
                raise _YamlKeyError(f"key '{key}' is given twice (lines {seen[key]} and {line})",
                                    line, "keep one of them: YAML would silently use the last")
            seen[key] = line
        self.flatten_mapping(node)
        return super().construct_mapping(node, deep=deep)


def read_yaml(path: Path) -> dict:
    """Read a YAML mapping, turning syntax errors into messages with the line number."""
    path = Path(path)
    if not path.is_file():
        raise FlyoverInputError("file not found", str(path), "an existing YAML file",
                                hint="check the path (relative paths start at the current folder)")
    try:
        data = yaml.load(path.read_text(encoding="utf-8"), Loader=_StrictLoader)
    except PermissionError:
        raise FlyoverInputError("the file cannot be read", str(path), "a readable file",
                                "permission denied", "check the file's permissions") from None
    except _YamlKeyError as exc:
        raise FlyoverInputError(exc.what, f"{path}, line {exc.line}", hint=exc.hint) from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"{path}, line {mark.line + 1}" if mark is not None else str(path)
        problem = getattr(exc, "problem", None) or "not valid YAML"
        raise FlyoverInputError(f"YAML syntax error: {problem}", where,
                                hint="look for a missing colon, a tab or unbalanced quotes "
                                     "at or just above that line") from None
    except UnicodeDecodeError:
        raise FlyoverInputError("not a text file", str(path), "a UTF-8 YAML file") from None
    if not isinstance(data, dict):
        raise FlyoverInputError("the file is not a mapping of keys", str(path),
                                "top-level keys such as site:, array:, passes:",
                                f"{type(data).__name__}")
    return data


def _key_path(parts) -> str:
    return ".".join(str(p) for p in parts)


def _schema_at(root: dict, path) -> dict:
    """The sub-schema of the value at ``path`` (follows $ref and additionalProperties)."""
    node = root
    for part in path:
        node = _resolve(root, node)
        props = node.get("properties", {})
        if part in props:
            node = props[part]
        elif isinstance(node.get("additionalProperties"), dict):
            node = node["additionalProperties"]
        elif "items" in node:
            node = node["items"]
        else:
            return {}
    return _resolve(root, node)


def _resolve(root: dict, node: dict) -> dict:
    while "$ref" in node:
        node = root["$defs"][node["$ref"].rsplit("/", 1)[-1]]
    return node


def validate_mapping(data: dict, schema_name: str, source: str) -> None:
    """Check a mapping read from ``source`` against a shipped schema (:func:`read_schema`);
    raise on the first problem, clearly worded: the key, what was expected and what was
    found, with a suggestion where one helps."""
    schema = read_schema(schema_name)
    errors = sorted(Draft202012Validator(schema).iter_errors(data),
                    key=lambda e: (len(e.absolute_path), _key_path(e.absolute_path)))
    if not errors:
        return
    err = errors[0]
    path = list(err.absolute_path)
    where = f"{source}, key {_key_path(path)}" if path else source
    if err.validator == "additionalProperties":
        known = sorted(_schema_at(schema, path).get("properties", {}))
        extra = [k for k in err.instance if k not in known]
        key = extra[0] if extra else "?"
        full = _key_path(path + [key])
        raise FlyoverInputError(f"unknown key '{full}'", source,
                                f"one of: {', '.join(known)}" if known else "",
                                hint=suggest(key, known) or "remove it or check its indentation")
    if err.validator == "required":
        missing = err.message.split("'")[1] if "'" in err.message else err.message
        raise FlyoverInputError(f"missing key '{_key_path(path + [missing])}'", source,
                                f"a value for '{missing}'",
                                hint="see `flyover template` for a complete commented example"
                                if schema_name == "campaign" else "")
    if err.validator == "type":
        hint = ""
        if isinstance(err.instance, (bool, datetime.date)) and "string" in str(err.validator_value):
            hint = (f"YAML reads this value as a {type(err.instance).__name__}: put it in quotes")
        raise FlyoverInputError("wrong type of value", where, f"a {err.validator_value}",
                                f"{err.instance!r}", hint)
    if err.validator in ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"):
        sub = _schema_at(schema, path)
        lo = sub.get("minimum", sub.get("exclusiveMinimum"))
        hi = sub.get("maximum", sub.get("exclusiveMaximum"))
        bounds = (f"from {lo} to {hi}" if lo is not None and hi is not None
                  else f"above {lo}" if lo is not None else f"at most {hi}")
        raise FlyoverInputError("value out of range", where, f"a number {bounds}",
                                f"{err.instance!r}", _unit_hint(path[-1] if path else ""))
    if err.validator == "enum":
        options = ", ".join(repr(v) for v in err.validator_value)
        hint = suggest(str(err.instance), [str(v) for v in err.validator_value])
        raise FlyoverInputError("value not allowed", where, f"one of {options}",
                                f"{err.instance!r}", hint)
    if err.validator in ("minItems", "maxItems"):
        raise FlyoverInputError("wrong number of items", where, "[min, max]" if
                                "range" in json.dumps(_schema_at(schema, path[:-1])) else
                                f"{err.validator} {err.validator_value}", f"{err.instance!r}")
    if err.validator == "oneOf" and path and path[-1] == "clock_offset_s":
        raise FlyoverInputError("wrong clock offset", where, "a number of seconds or 'auto'",
                                f"{err.instance!r}")
    raise FlyoverInputError(err.message, where)


def _unit_hint(key: str) -> str:
    if key.endswith("_c"):
        return "temperatures are in degrees Celsius"
    if key.endswith("_pct"):
        return "humidity is a percentage from 0 to 100"
    if key.endswith("_kpa"):
        return "pressure is in kPa (1013 hPa = 101.3 kPa)"
    return ""
