"""Reading a CSV table as people have it: encodings, separators, comments, decimal commas.

Our own convention: lines at the top of the file starting with ``#`` are comments (kept in
``df.attrs['comments']``). Blank lines are kept as empty rows so that data row numbers stay those
of the file. Files as spreadsheets export them are read: a byte-order mark, Windows-1252/Latin-1
or UTF-16 text, ';' or tab separators, decimal commas; what had to be assumed is listed in
``df.attrs['read_notes']``. What cannot be read without guessing is refused with the file and
line: binary content, a repeated header (pandas would quietly rename the second one ``x.1``),
values under an empty header, a row with more values than the header, a header without data rows.

:func:`read_csv_raw` returns the table with its headers as written; converting them to SI is
:func:`closure_nn.data.header_units.convert_headers` (both called by
:func:`closure_nn.data.table_io.read_table`).
"""
from __future__ import annotations

import csv
import io
import re
from pathlib import Path

import pandas as pd

from ..physics.checks import InputError
from .header_units import cell_to_float
from .schema import COLUMN
from .units import parse_header


def _read_comments(text: str) -> tuple[list[str], int]:
    """Leading ``#`` lines of ``text`` (without the '#') and the offset where the header starts."""
    comments: list[str] = []
    pos = 0
    for line in text.splitlines(keepends=True):
        if not line.startswith("#"):
            break
        comments.append(line[1:].rstrip("\r\n").removeprefix(" "))
        pos += len(line)
    return comments, pos


#: first bytes of files often given a .csv name by mistake -> what to tell the user
_SIGNATURES: tuple[tuple[bytes, str], ...] = (
    (b"PAR1", "this is a Parquet file; give it the suffix .parquet"),
    (b"PK\x03\x04", "this is a zip archive (a spreadsheet workbook?), not CSV text; export the sheet as CSV (UTF-8)"),
    (b"\xd0\xcf\x11\xe0", "this is an old-style spreadsheet workbook, not CSV text; export the sheet as CSV (UTF-8)"),
    (b"%PDF", "this is a PDF document, not CSV text"),
)


def _read_bytes(p: Path) -> bytes:
    if p.is_dir():
        raise InputError(f"{p}: is a folder; give the path of a table file (.csv or .parquet)")
    try:
        return p.read_bytes()
    except PermissionError:
        raise InputError(f"{p}: no permission to read the file; check its access rights") from None


def _read_text(p: Path) -> tuple[str, list[str]]:
    """The text of a CSV file and notes on how it was decoded.

    UTF-8 (a byte-order mark is dropped); UTF-16 with a byte-order mark (a spreadsheet's
    "Unicode text"); any other text as Windows-1252, or Latin-1 where Windows-1252 leaves a byte
    undefined, with a note. Binary content raises :class:`InputError`.
    """
    data = _read_bytes(p)
    for sig, what in _SIGNATURES:
        if data.startswith(sig):
            raise InputError(f"{p}: {what}")
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return data.decode("utf-16"), [f"{p}: read as UTF-16 (the file starts with its byte-order mark)"]
        except UnicodeDecodeError:
            raise InputError(f"{p}: starts with a UTF-16 byte-order mark but is not UTF-16 text; "
                             "save the table as CSV (UTF-8)") from None
    head = data[:65536]
    control = sum(head.count(bytes([c])) for c in range(32) if c not in (9, 10, 13)) + head.count(b"\x7f")
    if b"\x00" in head or control > max(2, len(head) // 200):
        raise InputError(f"{p}: binary content (control bytes), not CSV text; give a CSV table (UTF-8 text) "
                         "or a Parquet file with the suffix .parquet")
    try:
        return data.decode("utf-8-sig"), []
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        byte = data[exc.start]
    try:
        text, label = data.decode("cp1252"), "Windows-1252"
    except UnicodeDecodeError:
        text, label = data.decode("latin-1"), "Latin-1"  # every byte is a Latin-1 character
    return text, [f"{p}: not UTF-8 (byte 0x{byte:02x} on file line {line}), read as {label}; "
                  "save the table as UTF-8 if accented text looks wrong"]


#: field separators recognised in a CSV header, most common first (a tie goes to the first)
DELIMITERS = (",", ";", "\t")
_DELIM_NAME = {",": "','", ";": "';'", "\t": "tab"}
#: a number written with a decimal comma: 0,54  -1,2e-3  ,5
_DECIMAL_COMMA = re.compile(r"[+-]?(?:\d+,\d*|,\d+)(?:[eE][+-]?\d+)?")
#: digits grouped by thousands commas (1,234  12,345,678): in a comma-separated file ambiguous
THOUSANDS = re.compile(r"[+-]?[1-9]\d{0,2}(?:,\d{3})+")


def _sniff(header: str) -> str:
    """The delimiter that occurs most often in ``header`` outside double quotes (',' if none)."""
    counts = dict.fromkeys(DELIMITERS, 0)
    quoted = False
    for ch in header:
        if ch == '"':
            quoted = not quoted
        elif not quoted and ch in counts:
            counts[ch] += 1
    best = max(DELIMITERS, key=lambda d: counts[d])
    return best if counts[best] else ","


def _records(p: Path, body: str, delim: str, header_line: int) -> tuple[list[str], list[bool], int]:
    """Check the structure of the CSV ``body`` (header line first); return the stripped header
    names, per column whether it holds any value, and the largest number of fields in a row.

    Raises :class:`InputError` for a repeated header, values under an empty header, a row with
    more values than the header has names, and a header without data rows.
    """
    try:
        rows = csv.reader(io.StringIO(body, newline=""), delimiter=delim)
        header = next(rows, [])
        names = [h.strip() for h in header]
        seen: dict[str, int] = {}
        for j, name in enumerate(names):
            if name and name in seen:
                raise InputError(f"{p}, line {header_line}: the header names column {name!r} twice (columns "
                                 f"{seen[name] + 1} and {j + 1}, counting from 1); rename or remove one")
            seen.setdefault(name, j)
        used = [False] * len(names)
        n_rows = n_blank = 0
        widest = len(names)
        last = rows.line_num
        for fields in rows:
            n_rows += 1
            widest = max(widest, len(fields))
            line = header_line + last  # physical line where this record starts
            last = rows.line_num
            if not any(f.strip() for f in fields):
                n_blank += 1
                continue
            extra = [f for f in fields[len(names):] if f.strip()]
            if extra:
                hint = (f"; a value that contains {_DELIM_NAME[delim]} must be in double quotes "
                        "(a number with a decimal comma?)") if delim != "\t" else ""
                raise InputError(f"{p}, data row {n_rows} (file line {line}): {len(fields)} values, but the header "
                                 f"names {len(names)} columns{hint}")
            for j, f in enumerate(fields[:len(names)]):
                used[j] = used[j] or bool(f.strip())
    except csv.Error as exc:
        raise InputError(f"{p}, file line {header_line + rows.line_num}: cannot read as CSV ({exc})") from None
    if n_rows == n_blank:
        raise InputError(f"{p}: the table has a header but no data rows" + (" (only blank lines)" if n_rows else ""))
    for j, name in enumerate(names):
        if not name and used[j]:
            raise InputError(f"{p}, line {header_line}: column {j + 1} (counting from 1) has values but no header; "
                             "name it or delete the column")
    return names, used, widest


def _decimal_commas(raw: pd.DataFrame, delim: str) -> tuple[pd.DataFrame, int, str]:
    """Read numbers written with a decimal comma ('0,54' -> 0.54).

    In a ';'- or tab-separated file every column is looked at (an unknown column only when all
    its values then read as numbers); in a comma-separated file only quoted values of schema
    number columns, and never digits grouped like thousands ('1,234' stays text, ambiguous).
    Returns the table, the count of values read this way and the first one as an example.
    """
    count, example = 0, ""
    for pos, header in enumerate(raw.columns):
        col = raw.iloc[:, pos]
        if pd.api.types.is_numeric_dtype(col.dtype):
            continue
        spec = COLUMN.get(parse_header(str(header))[0])
        numeric = spec is not None and spec.dtype in ("float", "int")
        if not numeric and (delim == "," or spec is not None):
            continue
        cells = col.astype(object).tolist()
        conv: list[object] = []
        hits: list[int] = []
        for i, x in enumerate(cells):
            s = x.strip() if isinstance(x, str) else None
            if s and _DECIMAL_COMMA.fullmatch(s) and not (delim == "," and THOUSANDS.fullmatch(s)):
                conv.append(float(s.replace(",", ".")))
                hits.append(i)
            else:
                conv.append(x)
        if not hits:
            continue
        if not numeric and not all(isinstance(cell_to_float(v), float) for v in conv):
            continue
        if not example:
            example = f"data row {hits[0] + 1}, column {str(header)!r}: {cells[hits[0]]!r} -> {conv[hits[0]]:g}"
        count += len(hits)
        raw[header] = pd.Series(conv, index=raw.index, dtype=object)
    return raw, count, example


def read_csv_raw(p: Path) -> tuple[pd.DataFrame, int]:
    """The raw CSV table (headers as written) and the file line of data row 1."""
    text, notes = _read_text(p)
    comments, start = _read_comments(text)
    body = text[start:]
    header = body.splitlines()[0] if body else ""
    header_line = len(comments) + 1
    if not header.strip():
        raise InputError(f"{p}: no header line (the file is empty or holds only '#' comments)")
    delim = _sniff(header)
    names, used, widest = _records(p, body, delim, header_line)
    text_cols = [i for i, n in enumerate(names) if n and COLUMN.get(parse_header(n)[0]) is not None
                 and COLUMN[parse_header(n)[0]].dtype == "str"]
    try:
        # fields beyond the header are blank (checked above): read them under placeholder names, then drop
        padded = [f"\x00{j}" for j in range(widest)]
        raw = pd.read_csv(io.StringIO(body), sep=delim, skip_blank_lines=False, index_col=False, header=None, skiprows=1,
                          names=padded, dtype={padded[i]: str for i in text_cols} or None)
    except (pd.errors.ParserError, ValueError) as exc:
        raise InputError(f"{p}: cannot read as CSV: {str(exc).splitlines()[0]}") from None
    keep = [j for j, n in enumerate(names) if n or used[j]]  # drop nameless empty columns (trailing separators)
    raw = raw.iloc[:, keep]
    raw.columns = [names[j] for j in keep]
    raw, n_comma, example = _decimal_commas(raw, delim)
    if delim != ",":
        notes.append(f"{p}: values separated by {_DELIM_NAME[delim]}" +
                     (f"; {n_comma} number(s) with a decimal comma read as numbers (e.g. {example})" if n_comma else ""))
    elif n_comma:
        notes.append(f"{p}: {n_comma} quoted number(s) with a decimal comma read as numbers (e.g. {example})")
    raw.attrs = {"comments": comments} if comments else {}
    if notes:
        raw.attrs["read_notes"] = notes
    return raw, header_line + 1
