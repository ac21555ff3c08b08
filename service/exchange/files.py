"""Uploaded files: read with a size limit, and turn CSV or XLSX bytes into rows of text.

Every file is hostile until read: parsing runs in a worker thread (never on the event loop),
and a workbook is refused before anything is inflated when its zip directory declares more
than `MAX_UNCOMPRESSED_BYTES` in all, more than `MAX_RATIO` times a member's compressed size,
or more than `MAX_MEMBERS` parts (Python's zipfile never inflates past a member's declared
size, so the declared sizes bound the work). Cells longer than `MAX_CELL_CHARS`, more than
`MAX_COLUMNS` columns or `MAX_ROWS` data rows are refused too, each naming its limit.
"""

from __future__ import annotations

import csv
import functools
import io
import zipfile
from dataclasses import dataclass
from datetime import date, datetime
from typing import Any, Protocol

import anyio.to_thread

from service.errors import InvalidInput, ServiceError
from service.text import control_character_message

CHUNK = 64 * 1024
MAX_ROWS = 5000
MAX_COLUMNS = 100
MAX_CELL_CHARS = 2000
MAX_UNCOMPRESSED_BYTES = 32 * 1024 * 1024
MAX_RATIO = 200
MAX_MEMBERS = 500


class FileTooLarge(ServiceError):
    status_code = 413
    code = "file_too_large"


class Readable(Protocol):
    async def read(self, size: int = -1) -> bytes: ...


async def read_limited(upload: Readable, limit: int, field: str) -> bytes:
    """The whole upload, refused with 413 as soon as it passes `limit` bytes."""
    parts: list[bytes] = []
    total = 0
    while True:
        chunk = await upload.read(CHUNK)
        if not chunk:
            break
        total += len(chunk)
        if total > limit:
            raise FileTooLarge(
                f"{field}: the file is larger than {limit // 1024} KiB; accepted: a file of at "
                f"most {limit // 1024} KiB",
                detail={"field": field, "limit_bytes": limit},
            )
        parts.append(chunk)
    return b"".join(parts)


async def read_upload(upload: Readable, filename: str, *, limit: int, field: str) -> Table:
    """An uploaded CSV or XLSX as a Table: read with `limit`, parsed in a worker thread."""
    data = await read_limited(upload, limit, field)
    return await anyio.to_thread.run_sync(
        functools.partial(read_table, data, filename, field=field)
    )


def problem(loc: list[str | int], msg: str, kind: str = "value_error") -> dict[str, Any]:
    return {"loc": loc, "msg": msg, "type": kind}


@dataclass(frozen=True)
class Table:
    """A header row and data rows of text; `first_row` is the file's row number of rows[0]."""

    header: list[str]
    rows: list[list[str]]
    first_row: int = 2

    def column_index(self, wanted: str) -> int | None:
        """A column by header name (case and surrounding space ignored) or 1-based number."""
        names = [h.strip().casefold() for h in self.header]
        key = wanted.strip().casefold()
        if key in names:
            return names.index(key)
        if key.isdigit() and 1 <= int(key) <= len(self.header):
            return int(key) - 1
        return None


def _cell_text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value).strip()


def _refuse(field: str, msg: str, kind: str) -> InvalidInput:
    return InvalidInput(msg, detail=[problem(["body", field], msg, kind)])


def read_table(data: bytes, filename: str, *, field: str = "file") -> Table:
    """Parse CSV (UTF-8, comma, semicolon or tab separated) or XLSX (first sheet)."""
    name = filename.lower()
    if not data.strip():
        raise _refuse(
            field,
            f"{field}: '{filename}' is empty; accepted: a CSV or XLSX file with a header row",
            "empty_file",
        )
    if name.endswith(".xlsx") or data.startswith(b"PK\x03\x04"):
        rows = _xlsx_rows(data, filename, field)
    elif name.endswith((".csv", ".txt", ".tsv")) or not name:
        rows = _csv_rows(data, filename, field)
    else:
        raise _refuse(
            field,
            f"{field}: '{filename}' is not a CSV or XLSX file; accepted: .csv or .xlsx",
            "file_type",
        )
    while rows and not any(cell for cell in rows[-1]):
        rows.pop()
    if not rows:
        raise _refuse(
            field,
            f"{field}: '{filename}' has no rows; accepted: a header row and data rows",
            "empty_file",
        )
    _refuse_bad_cells(rows, filename, field)
    header = [cell.strip() for cell in rows[0]]
    if not any(header):
        raise _refuse(
            field,
            f"{field}: row 1 of '{filename}' is blank; accepted: a header row naming the columns",
            "no_header",
        )
    body = rows[1:]
    if len(body) > MAX_ROWS:
        raise _refuse(
            field,
            f"{field}: '{filename}' has {len(body)} data rows; accepted: at most {MAX_ROWS}",
            "too_many_rows",
        )
    width = len(header)
    # Short rows are padded; cells beyond the header have no column name and are dropped.
    return Table(header=header, rows=[(row + [""] * width)[:width] for row in body])


def _mib(size: int) -> str:
    return f"{size / (1024 * 1024):.1f} MiB"


def _refuse_bad_cells(rows: list[list[str]], filename: str, field: str) -> None:
    """Refuse a table with too many columns, an over-long cell or a control character,
    naming the first place."""
    for number, row in enumerate(rows, start=1):
        filled = [i for i, cell in enumerate(row) if cell]
        if filled and filled[-1] >= MAX_COLUMNS:
            raise _refuse(
                field,
                f"{field}: row {number} of '{filename}' has a value in column "
                f"{filled[-1] + 1}; accepted: at most {MAX_COLUMNS} columns",
                "too_many_columns",
            )
        for column, cell in enumerate(row, start=1):
            if len(cell) > MAX_CELL_CHARS:
                raise _refuse(
                    field,
                    f"{field}: row {number}, column {column} of '{filename}' holds "
                    f"{len(cell)} characters; accepted: at most {MAX_CELL_CHARS} in a cell",
                    "cell_too_long",
                )
            message = control_character_message(cell)
            if message:
                raise _refuse(
                    field,
                    f"{field}: row {number}, column {column} of '{filename}' {message}",
                    "control_character",
                )


def _refuse_zip_bomb(data: bytes, filename: str, field: str) -> None:
    """Refuse a workbook whose parts would inflate too far, before inflating any of them."""
    try:
        members = zipfile.ZipFile(io.BytesIO(data)).infolist()
    except zipfile.BadZipFile:
        return  # openpyxl names it unreadable
    if len(members) > MAX_MEMBERS:
        raise _refuse(
            field,
            f"{field}: '{filename}' holds {len(members)} parts; accepted: a workbook of at "
            f"most {MAX_MEMBERS}",
            "xlsx_too_large",
        )
    total = sum(member.file_size for member in members)
    if total > MAX_UNCOMPRESSED_BYTES:
        raise _refuse(
            field,
            f"{field}: '{filename}' would expand to {_mib(total)}; accepted: a workbook of at "
            f"most {_mib(MAX_UNCOMPRESSED_BYTES)} uncompressed (save a smaller sheet, or "
            "split it)",
            "xlsx_too_large",
        )
    for member in members:
        if member.file_size > MAX_RATIO * max(member.compress_size, 1024):
            raise _refuse(
                field,
                f"{field}: part '{member.filename}' of '{filename}' would expand "
                f"{member.file_size // max(member.compress_size, 1)} times; accepted: at most "
                f"{MAX_RATIO} times (a spreadsheet program never compresses so far)",
                "xlsx_too_large",
            )


def _csv_rows(data: bytes, filename: str, field: str) -> list[list[str]]:
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise _refuse(
            field,
            f"{field}: '{filename}' is not UTF-8 text (byte {exc.start}); accepted: a CSV saved "
            "as UTF-8",
            "encoding",
        ) from exc
    try:
        dialect = csv.Sniffer().sniff(text[:4096], delimiters=",;\t")
        delimiter = dialect.delimiter
    except csv.Error:
        delimiter = ","
    try:
        return [
            [cell.strip() for cell in row]
            for row in csv.reader(io.StringIO(text), delimiter=delimiter)
        ]
    except csv.Error as exc:
        raise _refuse(
            field, f"{field}: '{filename}' is not valid CSV: {exc}", "csv_syntax"
        ) from exc


def _xlsx_rows(data: bytes, filename: str, field: str) -> list[list[str]]:
    from openpyxl import load_workbook

    _refuse_zip_bomb(data, filename, field)
    try:
        workbook = load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except (zipfile.BadZipFile, KeyError, ValueError, OSError) as exc:
        raise _refuse(
            field,
            f"{field}: '{filename}' is not a readable XLSX workbook; accepted: .xlsx saved "
            "by a spreadsheet program",
            "xlsx_unreadable",
        ) from exc
    try:
        sheet = workbook.worksheets[0]
        rows: list[list[str]] = []
        # Bounded: a sheet may declare 16384 columns and a million rows it does not hold.
        for row in sheet.iter_rows(max_row=MAX_ROWS + 2, max_col=MAX_COLUMNS + 1, values_only=True):
            rows.append([_cell_text(value) for value in row])
            if len(rows) > MAX_ROWS + 1:
                break
        return rows
    finally:
        workbook.close()
