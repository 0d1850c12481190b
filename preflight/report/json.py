"""JSON report: schema, validation and an atomic writer."""

from __future__ import annotations

import json
import os
import tempfile
from importlib import resources
from typing import Any


def schema_text() -> str:
    return resources.files("preflight.report").joinpath("schema.json").read_text(encoding="utf-8")


def schema() -> dict[str, Any]:
    return json.loads(schema_text())


def write_atomic(path: str, text: str) -> None:
    """Write ``text`` to ``path`` whole or not at all (temporary file, then rename)."""
    folder = os.path.dirname(os.path.abspath(path))
    handle, tmp = tempfile.mkstemp(prefix=".preflight-", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as out:
            out.write(text)
            out.flush()
            os.fsync(out.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


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
    if not isinstance(data, dict) or data.get("schema_version") != "1":
        raise InputError(f"{path} is not a preflight report of schema version 1")
    problem = schema_problem(data)
    if problem:
        raise InputError(f"{path} is not a valid preflight report: {problem}")
    return data


def schema_problem(data: Any) -> str | None:
    """The first way ``data`` breaks the report schema, in one line, or ``None`` when it is valid."""
    import jsonschema

    error = jsonschema.exceptions.best_match(jsonschema.Draft202012Validator(schema()).iter_errors(data))
    if error is None:
        return None
    where = "/".join(str(part) for part in error.absolute_path) or "the top level"
    return f"{' '.join(error.message.split())[:200]} (at {where})"
