"""Reading and validating the input: the table, and the hypothesised graph of ``--graph``.

Every problem a user can fix becomes an :class:`InputError` with one clear
line; the input file is only ever opened for reading.
"""

from __future__ import annotations

import csv
import hashlib
import io
import numbers
import os
import re
import sys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from preflight.errors import InputError

PARQUET_MAGIC = b"PAR1"
PARQUET_EXTENSIONS = (".parquet", ".pq")
TSV_EXTENSIONS = (".tsv", ".tab")
NA_TOKENS = ("NA", "NaN", "nan", "null", "NULL", ".")
"""Cells read as missing values (besides empty cells)."""
MIN_ROWS = 3
"""Fewest complete rows any check can use; below, the input is refused."""
_LINE_BREAK = re.compile(r"\r\n|\r|\n")
STRAY_MAX_SHARE = 0.05
"""A text column is still numeric when at most this share of its non-empty cells (or a single
cell) are not numbers; those cells count as missing values.  More, and it is a text column."""


@dataclass(frozen=True)
class LoadedData:
    """A validated numeric table and where it came from."""

    values: np.ndarray
    """(rows_used, p) float64, rows with missing values already dropped."""
    names: tuple[str, ...]
    path: str
    sha256: str | None
    rows: int
    """Data rows read from the source."""
    rows_used: int
    missing_by_column: dict[str, int] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    stray_by_column: dict[str, int] = field(default_factory=dict)
    """Cells per column that were not numbers and are counted as missing (see STRAY_MAX_SHARE)."""
    left_out: dict[str, str] = field(default_factory=dict)
    """Columns of the source the analysis leaves out, each with why ("excluded", "not selected", "not numeric")."""


def _read_source_bytes(source: str) -> bytes:
    if source == "-":
        stream = getattr(sys.stdin, "buffer", None)
        try:
            if stream is None or stream.closed:
                raise InputError("standard input is closed: pipe a CSV table into `preflight check -`")
            return stream.read()
        except InputError:
            raise
        except (OSError, ValueError) as exc:
            raise InputError(f"cannot read standard input: {getattr(exc, 'strerror', None) or exc}") from None
    if os.path.isdir(source):
        raise InputError(f"{source} is a folder, not a data file")
    try:
        with open(source, "rb") as handle:
            return handle.read()
    except FileNotFoundError:
        raise InputError(f"input file not found: {source}") from None
    except PermissionError:
        raise InputError(f"input file is not readable (permission denied): {source}") from None
    except OSError as exc:
        raise InputError(f"cannot read input file {source}: {exc.strerror or exc}") from None


def _choose_separator(source: str, sep: str | None) -> str:
    if sep is not None:
        if sep in ("\\t", "tab", "TAB"):
            return "\t"
        if len(sep) != 1:
            raise InputError(f"--sep must be a single character, got {sep!r}")
        return sep
    return "\t" if source.lower().endswith(TSV_EXTENSIONS) else ","


def _decode_text(raw: bytes, label: str) -> str:
    if b"\x00" in raw:
        raise InputError(f"{label} looks like a binary file, not a CSV/TSV table (use a .parquet name for Parquet)")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"{label} is not UTF-8 text (undecodable byte at offset {exc.start})") from None
    return text


def _separator_hint(header: list[str], sep: str) -> str:
    """A suggestion when a one-field header looks split by another separator."""
    if len(header) != 1:
        return ""
    for other, shown in ((";", "';'"), ("\t", "tab"), ("|", "'|'"), (",", "','")):
        if other != sep and other in header[0]:
            comma = " (with decimal commas, convert them to points first)" if other == ";" else ""
            return f"; the header looks separated by {shown}: try --sep {shown}{comma}"
    return ""


def _check_ragged(text: str, sep: str, label: str) -> list[str]:
    """Return the header fields; refuse rows with a different number of fields.

    With quotes in the text the csv module reads the records, so a quoted
    field may hold the separator, a newline or a carriage return.
    """
    if '"' in text:
        reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep, skipinitialspace=True)
        records = []
        for row in reader:
            if len(row) > 1 or (row and row[0].strip()):
                records.append((reader.line_num, len(row), row))
        if not records:
            raise InputError(f"{label} is empty")
        header = records[0][2]
        counts = ((line_no, count) for line_no, count, _ in records)
    else:
        # Only CR and LF end a record; str.splitlines() would also split at
        # form feeds, U+0085 or U+2028 inside a column name.
        lines = _LINE_BREAK.split(text)
        counts = ((i, line.count(sep) + 1) for i, line in enumerate(lines, start=1) if line.strip())
        header = next(line for line in lines if line.strip()).split(sep)
    expected = len(header)
    for line_no, count in counts:
        if count != expected:
            raise InputError(
                f"{label}: line {line_no} has {count} fields but the header has {expected} (ragged rows)"
                + _separator_hint(header, sep)
            )
    return [h.strip() for h in header]


def _frame_from_text(text: str, sep: str, label: str):
    import pandas as pd

    stripped = text.strip()
    if not stripped:
        raise InputError(f"{label} is empty")
    header = _check_ragged(text, sep, label)
    if any(name == "" for name in header):
        raise InputError(f"{label}: the header has an empty column name (position {header.index('') + 1})")
    _refuse_duplicates(header, label)
    try:
        frame = pd.read_csv(io.StringIO(text), sep=sep, skipinitialspace=True, skip_blank_lines=True,
                            na_values=["", *NA_TOKENS], keep_default_na=True)
    except (pd.errors.ParserError, ValueError) as exc:
        message = str(exc).strip().splitlines()[-1]
        raise InputError(f"{label} could not be parsed as a table: {message}") from None
    if frame.shape[1] != len(header):
        raise InputError(f"{label}: the header has {len(header)} fields but the table reads as "
                         f"{frame.shape[1]} columns; check the quoting of the header")
    frame.columns = header
    return frame


def _refuse_duplicates(header, label: str) -> None:
    seen: set[str] = set()
    for name in header:
        if name in seen:
            raise InputError(f"{label}: column name {name!r} appears more than once")
        seen.add(name)


def _frame_from_parquet(raw: bytes, label: str):
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        parquet = pq.ParquetFile(io.BytesIO(raw))
        names = list(parquet.schema_arrow.names)
    except (pa.ArrowException, OSError) as exc:
        raise InputError(f"{label} is not a readable Parquet file: {_first_line(exc)}") from None
    _refuse_duplicates(names, label)
    if parquet.metadata.num_rows == 0:
        # Checked before any column is read: converting an empty table has
        # aborted the interpreter from pyarrow's thread pool.
        raise InputError(f"{label} has a header but no data rows")
    try:
        table = parquet.read(use_threads=False)
        return table.to_pandas(use_threads=False)
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise InputError(f"{label} is not a readable Parquet file: {_first_line(exc)}") from None


def _first_line(exc: BaseException) -> str:
    lines = [line.strip() for line in str(exc).splitlines() if line.strip()]
    return lines[0] if lines else type(exc).__name__


def _as_numbers(column, name: str):
    """(float64 values or None when the column is text, count of stray cells, an example for messages).

    Numeric, boolean and nullable dtypes convert directly.  Anything else
    (text read from a file, object columns of Python numbers or Decimal,
    categoricals) is parsed cell by cell; empty cells stay missing, and cells
    that are not numbers are stray tokens.  Up to ``STRAY_MAX_SHARE`` of the
    non-empty cells (at least one) they count as missing values; more, and
    the column is text.
    """
    import pandas as pd

    if pd.api.types.is_complex_dtype(column):
        raise InputError(f"column {name!r} holds complex numbers; split them into real columns")
    if pd.api.types.is_datetime64_any_dtype(column) or isinstance(column.dtype, pd.PeriodDtype):
        return None, 0, " (dates and times)"
    if pd.api.types.is_bool_dtype(column) or pd.api.types.is_numeric_dtype(column):
        try:
            return column.to_numpy(dtype=np.float64, na_value=np.nan), 0, ""
        except (TypeError, ValueError):
            pass
    cells = column.astype(object)
    stripped = cells.map(lambda v: _cell_value(v, pd))
    try:
        values = pd.to_numeric(stripped, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    except (OverflowError, TypeError, ValueError):
        values = np.array([_one_number(v) for v in stripped], dtype=np.float64)
    blank = stripped.map(lambda v: isinstance(v, str) and v in ("", *NA_TOKENS)).to_numpy(dtype=bool)
    filled = stripped.notna().to_numpy(dtype=bool) & ~blank
    stray_mask = np.isnan(values) & filled
    stray = int(stray_mask.sum())
    present = int(filled.sum())
    example = ""
    if stray:
        k = int(np.flatnonzero(stray_mask)[0])
        example = f" (e.g. {_shown(cells.iloc[k])} in data row {k + 1})"
    limit = max(1, int(STRAY_MAX_SHARE * present))
    if stray > limit or stray >= present:
        return None, stray, example
    return values, stray, example  # stray cells are already NaN: to_numeric coerced them


def _cell_value(value, pd):
    """A cell as to_numeric should see it: text stripped; numbers and missing markers as they are;
    anything else (a date, a list, an object) as text that is not a number."""
    if isinstance(value, str):
        return value.strip()
    if isinstance(value, numbers.Number) or value is None or value is pd.NA or value is pd.NaT:
        return value
    return f"<{type(value).__name__}>"


def _one_number(value) -> float:
    try:
        return float(value)
    except OverflowError:
        return float("inf") if value > 0 else float("-inf")
    except (TypeError, ValueError):
        return float("nan")


def _shown(value) -> str:
    text = repr(value) if isinstance(value, str) else repr(str(value))
    return text if len(text) <= 40 else text[:37] + "...'"


def sha256_of(raw: bytes) -> str:
    return hashlib.sha256(raw).hexdigest()


def load_table(
    source,
    *,
    sep: str | None = None,
    columns: list[str] | None = None,
    exclude: list[str] | None = None,
    missing: str = "drop",
) -> LoadedData:
    """Read ``source`` (path, ``"-"`` for CSV on stdin, or a pandas DataFrame) and validate it.

    Rules: at least two numeric columns must remain; asked-for columns must
    exist and be numeric; unasked text columns are skipped with a warning;
    infinite values are refused; rows with a missing value in an analysed
    column are dropped and counted (``missing="drop"``) or refused
    (``missing="error"``).
    """
    import pandas as pd

    if missing not in ("drop", "error"):
        raise InputError(f"--missing must be 'drop' or 'error', got {missing!r}")
    frame, label, path, digest = _read_frame(source, sep)
    rows = int(frame.shape[0])
    if rows == 0:
        raise InputError(f"{label} has a header but no data rows")
    names = list(frame.columns)
    chosen, asked = _chosen_columns(names, columns, exclude, label)
    warnings: list[str] = []
    numeric, converted, stray_by_column = _numeric_columns(frame, chosen, asked is not None, warnings)
    if len(numeric) < 2:
        found = f"found {len(numeric)}" + (f" ({numeric[0]})" if numeric else "")
        hint = _separator_hint(names, _choose_separator(path, sep)) if not isinstance(source, pd.DataFrame) else ""
        raise InputError(f"{label} needs at least 2 numeric columns to analyse, {found}{hint}")
    values, missing_by_column = _complete_rows(np.column_stack([converted[name] for name in numeric]), numeric,
                                               missing, stray_by_column, warnings)
    if values.shape[0] == 0:
        raise InputError(f"{label}: no row is complete in the analysed columns")
    if values.shape[0] < MIN_ROWS:
        raise InputError(f"{label} has only {values.shape[0]} usable row(s); at least {MIN_ROWS} are needed")
    return LoadedData(
        values=np.ascontiguousarray(values),
        names=tuple(numeric),
        path=path,
        sha256=digest,
        rows=rows,
        rows_used=int(values.shape[0]),
        missing_by_column=missing_by_column,
        warnings=tuple(warnings),
        stray_by_column=stray_by_column,
        left_out={name: ("excluded" if name in (exclude or ()) else "not selected" if name not in chosen
                         else "not numeric") for name in names if name not in numeric},
    )


def _read_frame(source, sep: str | None):
    """(frame with string column names, label for messages, path for the report, SHA-256 of the bytes or None)."""
    import pandas as pd

    if isinstance(source, pd.DataFrame):
        label = "the DataFrame"
        _refuse_duplicates([str(c) for c in source.columns], label)
        frame = source.copy(deep=False)
        frame.columns = [str(c) for c in frame.columns]
        return frame, label, "<DataFrame>", None
    if not isinstance(source, (str, os.PathLike)):
        hint = "; pandas.DataFrame(data) makes one from a dict of columns" if isinstance(source, dict) else ""
        raise InputError(f"data must be a file path, '-' for standard input, or a pandas DataFrame, "
                         f"not a {type(source).__name__}{hint}")
    path = str(source)
    label = "standard input" if path == "-" else path
    raw = _read_source_bytes(path)
    digest = sha256_of(raw)
    if not raw.strip():
        raise InputError(f"{label} is empty")
    if path.lower().endswith(PARQUET_EXTENSIONS) or raw[:4] == PARQUET_MAGIC:
        frame = _frame_from_parquet(raw, label)
    else:
        frame = _frame_from_text(_decode_text(raw, label), _choose_separator(path, sep), label)
    return frame, label, path, digest


def _chosen_columns(names: list[str], columns: list[str] | None, exclude: list[str] | None,
                    label: str) -> tuple[list[str], list[str] | None]:
    """(the columns to analyse, in order; the columns asked for by name, or None)."""
    for key, listed in (("columns", columns), ("exclude", exclude)):
        if isinstance(listed, str):  # the API's lists; a string would be read letter by letter
            raise InputError(f"{key} must be a list of column names, not the string {listed!r}")
    asked = [c.strip() for c in columns] if columns else None
    for option, listed in (("--columns", asked), ("--exclude", exclude)):
        for name in listed or []:
            if name not in names:
                more = " ..." if len(names) > 12 else ""
                raise InputError(f"{option} names {name!r}, which is not a column of {label} "
                                 f"(columns: {', '.join(names[:12])}{more})")
    if asked is not None:
        _refuse_duplicates(asked, "--columns")
    chosen = asked if asked is not None else names
    return [c for c in chosen if c not in set(exclude or [])], asked


def _numeric_columns(frame, chosen: list[str], asked: bool,
                     warnings: list[str]) -> tuple[list[str], dict[str, np.ndarray], dict[str, int]]:
    """(numeric column names, their float64 values, stray cells per column); text columns skipped with a warning.

    A text column asked for by name (``asked``) is an error instead.
    """
    numeric: list[str] = []
    converted: dict[str, np.ndarray] = {}
    stray_by_column: dict[str, int] = {}
    for name in chosen:
        parsed, stray, example = _as_numbers(frame[name], name)
        if parsed is None:
            if asked:
                raise InputError(f"column {name!r} is not numeric{example}")
            warnings.append(f"skipped non-numeric column {name!r}{example}")
            continue
        numeric.append(name)
        converted[name] = parsed
        if stray:
            stray_by_column[name] = stray
            warnings.append(f"column {name!r}: {stray} cell(s) that are not numbers{example} "
                            "treated as missing values")
    return numeric, converted, stray_by_column


def _complete_rows(values: np.ndarray, numeric: list[str], missing: str, stray_by_column: dict[str, int],
                   warnings: list[str]) -> tuple[np.ndarray, dict[str, int]]:
    """(the rows without a missing value, missing values per column); infinite values are refused.

    With ``missing="error"`` a missing value is refused too.
    """
    rows = values.shape[0]
    infinite = np.isinf(values)
    if infinite.any():
        j = int(np.flatnonzero(infinite.any(axis=0))[0])
        i = int(np.flatnonzero(infinite[:, j])[0])
        raise InputError(f"column {numeric[j]!r} has an infinite value in data row {i + 1}")
    is_missing = np.isnan(values)
    missing_by_column = {numeric[j]: int(is_missing[:, j].sum()) for j in range(len(numeric)) if is_missing[:, j].any()}
    if missing_by_column:
        if missing == "error":
            first = next(iter(missing_by_column))
            strays = (f", {stray_by_column[first]} of them cells that are not numbers"
                      if stray_by_column.get(first) else "")
            raise InputError(
                f"column {first!r} has {missing_by_column[first]} missing value(s){strays}; "
                f"use --missing drop to drop incomplete rows"
            )
        keep = ~is_missing.any(axis=1)
        values = values[keep]
        warnings.append(f"dropped {rows - int(keep.sum())} of {rows} rows with missing values")
    return values, missing_by_column


# ---------------------------------------------------------------------------- graph files


@dataclass(frozen=True)
class GraphFile:
    """A hypothesised DAG read from a file: its edges by variable name, checked against the table's columns."""

    path: str
    edges: tuple[tuple[str, str], ...]
    """(source, target) pairs, in the file's order."""

    @property
    def name(self) -> str:
        """The file's name without its folder, as the report shows it."""
        return os.path.basename(self.path)

    def matrix(self, names: Sequence[str]) -> np.ndarray:
        """The int8 adjacency matrix of the DAG over ``names`` (the table's columns in any order)."""
        index = {str(name): k for k, name in enumerate(names)}
        dag = np.zeros((len(index), len(index)), dtype=np.int8)
        for source, target in self.edges:
            dag[index[source], index[target]] = 1
        return dag


def _brief(names: Sequence[str], limit: int = 8) -> str:
    shown = ", ".join(names[:limit])
    return shown if len(names) <= limit else f"{shown}, ... ({len(names)} in all)"


def _clip_line(text: str, limit: int = 60) -> str:
    text = text.strip()
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _unquote(name: str) -> str:
    name = name.strip()
    if len(name) >= 2 and name[0] == name[-1] and name[0] in "\"'":
        return name[1:-1].strip()
    return name


def _first_content_line(lines: list[str]) -> str | None:
    for raw in lines:
        s = raw.strip()
        if s and not s.startswith("#"):
            return s
    return None


def _csv_edges(text: str, label: str) -> list[tuple[int, str, str]]:
    reader = csv.reader(io.StringIO(text))
    edges: list[tuple[int, str, str]] = []
    header: list[str] | None = None
    source_col = target_col = -1
    try:
        for row in reader:
            line = reader.line_num
            if not any(field.strip() for field in row):
                continue
            if header is None:
                header = [field.strip().lower() for field in row]
                if "source" not in header or "target" not in header:
                    raise InputError(f"graph file {label} line {line}: the CSV header must name the columns "
                                     f"source and target, found: {_clip_line(', '.join(header))}")
                source_col, target_col = header.index("source"), header.index("target")
                continue
            if len(row) <= max(source_col, target_col):
                raise InputError(f"graph file {label} line {line}: malformed row {_clip_line(','.join(row))!r}, "
                                 f"expected {len(header)} fields")
            source, target = row[source_col].strip(), row[target_col].strip()
            if not source or not target:
                raise InputError(f"graph file {label} line {line}: malformed row {_clip_line(','.join(row))!r}, "
                                 "source and target must both be given")
            edges.append((line, source, target))
    except csv.Error as exc:
        raise InputError(f"graph file {label} line {reader.line_num}: malformed CSV ({exc})") from None
    return edges


def _arrow_edges(lines: list[str], label: str) -> list[tuple[int, str, str]]:
    edges = []
    for line, raw in enumerate(lines, start=1):
        s = raw.strip()
        if not s or s.startswith("#"):
            continue
        parts = s.split("->")
        if len(parts) != 2 or not _unquote(parts[0]) or not _unquote(parts[1]):
            raise InputError(f"graph file {label} line {line}: malformed line {_clip_line(s)!r}, "
                             "expected 'source -> target'")
        edges.append((line, _unquote(parts[0]), _unquote(parts[1])))
    return edges


def read_graph(path, names: Sequence[str], left_out: Mapping[str, str] | None = None) -> GraphFile:
    """Read a user's DAG over the variables ``names``, checked against them.

    Two formats: a CSV edge list whose header has the columns ``source`` and
    ``target`` (any case, other columns ignored), or a text file with one
    ``a -> b`` per line (blank lines and lines starting with ``#`` ignored;
    names may be quoted).  A ``.csv`` suffix, or a first line that names
    source and target, selects CSV.  Every problem raises
    :class:`~preflight.errors.InputError` with a one-line message: a missing
    file, an unknown variable, a self-loop, a malformed line (with its
    number) or a cycle (with its nodes in order).  ``preflight.check`` and
    the CLI call it right after loading the table, before any computation.
    ``left_out`` maps columns of the source that the analysis leaves out to
    why (:attr:`LoadedData.left_out`): a graph naming one is told so, not
    that the name is unknown.
    """
    from preflight.graph import find_cycle

    names = [str(name) for name in names]
    index = {name: k for k, name in enumerate(names)}
    if len(index) != len(names):
        repeated = sorted({name for name in names if names.count(name) > 1})
        raise InputError(f"variable names must be unique, repeated: {_brief(repeated)}")
    path = Path(path)
    label = str(path)
    if not path.exists():
        raise InputError(f"graph file not found: {label}")
    if not path.is_file():
        raise InputError(f"graph file {label} is not a regular file")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(f"graph file {label} is not UTF-8 text") from None
    except OSError as exc:
        raise InputError(f"cannot read graph file {label}: {exc.strerror or exc}") from None
    lines = text.splitlines()
    first = _first_content_line(lines)
    looks_csv = first is not None and "->" not in first and {"source", "target"} <= {
        field.strip().lower() for field in first.split(",")}
    if path.suffix.lower() == ".csv" or looks_csv:
        edges = _csv_edges(text, label)
    else:
        edges = _arrow_edges(lines, label)
    if not edges:
        raise InputError(f"graph file {label} names no edge; a hypothesised graph needs at least one "
                         "(lines 'a -> b' or a CSV with columns source,target)")

    for line, source, target in edges:
        for name in (source, target):
            if left_out and name in left_out:
                raise InputError(f"graph file {label} line {line}: column {name!r} is left out of the analysis "
                                 f"({left_out[name]}); analyse it or drop its edges from the graph")
            if name not in index:
                raise InputError(f"graph file {label} line {line}: unknown variable {name!r}; "
                                 f"known variables: {_brief(names)}")
        if source == target:
            raise InputError(f"graph file {label} line {line}: self-loop {source} -> {target}")
    given = GraphFile(path=label, edges=tuple((source, target) for _, source, target in edges))
    dag = given.matrix(names)
    cycle = find_cycle(dag)
    if cycle is not None:
        chain = " -> ".join(names[k] for k in cycle + [cycle[0]])
        raise InputError(f"graph file {label} has a cycle: {chain}")
    return given


def read_graph_file(path, names: Sequence[str]) -> np.ndarray:
    """The int8 adjacency matrix over ``names`` of the DAG in a graph file (see :func:`read_graph`)."""
    return read_graph(path, names).matrix(names)
