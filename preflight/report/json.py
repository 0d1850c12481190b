"""JSON report: the schema, and reading a saved report back (validated against it).

Reports are written by :mod:`preflight.outputs`.
"""

from __future__ import annotations

import json
from importlib import resources
from typing import Any


def schema_text() -> str:
    return resources.files("preflight.report").joinpath("schema.json").read_text(encoding="utf-8")


def schema() -> dict[str, Any]:
    return json.loads(schema_text())


def read_report(path: str) -> dict[str, Any]:
    from preflight.errors import InputError

    try:
        with open(path, encoding="utf-8") as handle:
            data = json.load(handle)
    except FileNotFoundError:
        raise InputError(f"report file not found: {path}") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read report {path}: {exc}") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path} is not a JSON report: {exc.msg} at line {exc.lineno}") from None
    except RecursionError:
        raise InputError(f"{path} is not a JSON report: arrays or objects nested too deeply") from None
    if not isinstance(data, dict) or data.get("schema_version") != "1":
        raise InputError(f"{path} is not a preflight report of schema version 1")
    problem = first_schema_problem(data) or _first_name_problem(data)
    if problem is not None:
        raise InputError(f"{path} is not a valid preflight report: {problem}")
    return data


def first_schema_problem(data: Any) -> str | None:
    """The first way ``data`` departs from the shipped schema, in one line; None when it conforms."""
    import jsonschema

    checker = jsonschema.validators.validator_for(schema())(schema())
    errors = sorted(checker.iter_errors(data), key=lambda e: (len(e.absolute_path), list(map(str, e.absolute_path))))
    if not errors:
        return None
    error = errors[0]
    where = "".join(f"[{p}]" if isinstance(p, int) else f".{p}" for p in error.absolute_path).lstrip(".")
    message = " ".join(error.message.split())
    if len(message) > 160:
        message = message[:157] + "..."
    return f"{where or 'top level'}: {message}"


def _first_name_problem(data: dict[str, Any]) -> str | None:
    """The first variable, pair or structure entry naming a column that ``input.columns`` does not list once (the
    renderers look every name up there); None when all agree.  Only called on a report that conforms to the
    schema, which leaves ``structure`` and ``pairs[].conditioning`` open."""
    from collections import Counter

    columns = data["input"]["columns"]
    repeated = sorted(name for name, count in Counter(columns).items() if count > 1)
    if repeated:
        return f"input.columns: column name {repeated[0]!r} appears more than once"
    known = set(columns)
    for k, variable in enumerate(data["variables"]):
        if variable["name"] not in known:
            return f"variables[{k}].name: {variable['name']!r} is not in input.columns"
    for k, pair in enumerate(data["pairs"]):
        for key in ("x", "y"):
            if pair[key] not in known:
                return f"pairs[{k}].{key}: {pair[key]!r} is not in input.columns"
        if "conditioning" in pair and not _names_of(pair["conditioning"], known):
            return f"pairs[{k}].conditioning: not a list of names from input.columns"
    structure = data.get("structure")
    if structure is None:
        return None
    if not isinstance(structure, dict):
        return "structure: not an object"
    for key in ("order", "gaussian_noises"):
        if key in structure and not _names_of(structure[key], known, distinct=True):
            return f"structure.{key}: not a list of distinct names from input.columns"
    parents = structure.get("parents", {})
    if not isinstance(parents, dict) or not all(
            child in known and _names_of(given, known, distinct=True) for child, given in parents.items()):
        return "structure.parents: not a map from names in input.columns to lists of them"
    return None


def _names_of(value: Any, known: set[str], distinct: bool = False) -> bool:
    """Whether ``value`` is a list of names from ``known`` (each once, when ``distinct``)."""
    if not isinstance(value, list) or not all(isinstance(name, str) and name in known for name in value):
        return False
    return not distinct or len(set(value)) == len(value)
