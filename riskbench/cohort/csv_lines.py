"""Read a CSV source without guessing: the first line is the header, every later line is accounted for.

Nothing is sniffed: there is no comment character (a data line that begins with ``#`` is data), no header
detection (line 1 is the header, always), no type inference (every cell stays text; parsing dates and numbers
is a contract check) and no null spellings (``NA`` is the text ``NA``). Each data row carries the file's line
number (the header is line 1), so messages and the ledger can say "line 57". Lines that hold no row are not
dropped: a blank line and a line with the wrong number of fields are returned with their line numbers and the
ledger state they take (``blank_line``, ``wrong_field_count``).

The text is decoded with the source's ``encoding`` (``utf-8`` unless ``[sources.<table>] encoding`` says
otherwise); a file that is not valid text in that encoding, or is not text at all, stops with one line naming
the file, the first bad line and the key that fixes it.

Two readers, one result: pyarrow's CSV parser reads the common case (every line after the header is one
record with the header's number of fields) quickly; when the count of records differs from the count of lines
(blank lines, quoted line breaks, ragged lines), Python's :mod:`csv` module reads the text again line by line
and assigns each line its state exactly.
"""

from __future__ import annotations

import codecs
import csv
import gzip
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from riskbench.cohort.errors import CohortInputError
from riskbench.cohort.reasons import RowState

#: Encodings whose text holds NUL bytes by design (a NUL byte is no sign of a binary file there).
_WIDE_ENCODINGS = ("utf_16", "utf_16_le", "utf_16_be", "utf_32", "utf_32_le", "utf_32_be")
#: Bytes looked at to tell a binary file from text.
_SNIFF_BYTES = 65536


@dataclass(frozen=True)
class CsvLines:
    """A CSV file split into its header, its data rows and its other lines.

    Attributes
    ----------
    header : tuple of str
        The names on line 1, as written.
    rows : pyarrow.Table
        ``row_number`` (int64, the file's line number where the row starts) and one text column per header
        name; blank cells are empty strings.
    other_lines : pyarrow.Table
        ``row_number`` (int64) and ``state`` (a :class:`RowState` code) of every line after the header that
        holds no data row.
    """

    header: tuple[str, ...]
    rows: pa.Table
    other_lines: pa.Table


def check_encoding(encoding: str, where: str) -> str:
    """The codec name Python knows for ``encoding``; an unknown name is a :class:`CohortInputError`."""
    try:
        return codecs.lookup(encoding).name
    except LookupError:
        raise CohortInputError(
            f'{where}: encoding = {encoding!r} is not a text encoding Python knows; use e.g. "utf-8", '
            '"latin-1", "cp1252" or "utf-16"'
        ) from None


def read_csv_lines(path: Path, table: str, encoding: str = "utf-8", max_lines: int | None = None) -> CsvLines:
    """Read ``path`` (CSV, or gzip-compressed CSV when the name ends in ``.gz``) for source ``table``.

    ``max_lines`` reads only the header and that many further lines (a sample, e.g. for checking a
    configuration before a run); None reads the whole file.

    Raises
    ------
    CohortInputError
        The file is empty, binary, not valid text in ``encoding``, has no usable header on line 1 (a blank
        line, a ``#`` remark, an empty or repeated column name) or has quoting that never closes. The message
        names the file and the line, never a cell's contents.
    """
    codec = check_encoding(encoding, f"[sources.{table}]")
    text, data = _decode(path, table, encoding, codec, max_lines)
    header = _header(text, path)
    rows = _read_fast(data, header)
    if rows is None:
        return _read_exact(text, header, path)
    empty = pa.table({"row_number": pa.array([], pa.int64()), "state": pa.array([], pa.string())})
    return CsvLines(header, rows, empty)


def _decode(path: Path, table: str, encoding: str, codec: str, max_lines: int | None) -> tuple[str, bytes]:
    """The file's text and its UTF-8 bytes (without a byte-order mark); its first ``1 + max_lines`` lines
    when ``max_lines`` is given."""
    try:
        raw = (
            _head(path, max_lines)
            if max_lines is not None and codec.replace("-", "_") not in _WIDE_ENCODINGS
            else path.read_bytes()
        )
    except OSError as exc:
        raise CohortInputError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    if path.suffix.lower() == ".gz":
        try:
            raw = gzip.decompress(raw)
        except (OSError, EOFError):
            raise CohortInputError(
                f"{path}: the name ends in .gz but the file is not gzip-compressed; rename it or compress it with gzip"
            ) from None
        if max_lines is not None and codec.replace("-", "_") not in _WIDE_ENCODINGS:
            raw = _first_lines(raw, max_lines)
    if not raw.strip():
        raise CohortInputError(f"{path}: the file is empty; line 1 must be the header with the column names")
    if raw.startswith(b"PAR1"):
        raise CohortInputError(f"{path}: this is a Parquet file, not CSV; give it a .parquet name")
    wide = codec.replace("-", "_") in _WIDE_ENCODINGS
    if not wide and _looks_binary(raw[:_SNIFF_BYTES]):
        raise CohortInputError(
            f"{path}: this is not a text (CSV) file; the {table} source must be a CSV file "
            "with a header line, or a Parquet file named .parquet"
        )
    key = f"[sources.{table}] encoding"
    try:
        text = raw.decode(codec)
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        hint = (
            'set encoding = "latin-1" (or "cp1252", "utf-16") under [sources.' + table + "]"
            if codec == "utf-8"
            else f"check {key} = {encoding!r}"
        )
        raise CohortInputError(
            f"{path}: line {line} is not valid {encoding} text (first bad byte at offset {exc.start}); the file "
            f"was saved in another encoding: {hint}"
        ) from None
    if text.startswith("\ufeff"):
        text = text[1:]
    if "\x00" in text:
        raise CohortInputError(
            f"{path}: the text holds NUL characters, so this is not a CSV file (or "
            f"{key} = {encoding!r} is wrong for it)"
        )
    data = raw[3:] if codec == "utf-8" and raw.startswith(codecs.BOM_UTF8) else raw
    if codec != "utf-8":
        data = text.encode("utf-8")
    return text, data


def _head(path: Path, max_lines: int) -> bytes:
    """The first ``1 + max_lines`` lines of a file in a one-byte-newline encoding (gzip files whole)."""
    if path.suffix.lower() == ".gz":
        return path.read_bytes()  # cut after decompressing
    chunks: list[bytes] = []
    newlines = 0
    with path.open("rb") as handle:
        while newlines <= max_lines:
            chunk = handle.read(1 << 20)
            if not chunk:
                return b"".join(chunks)
            chunks.append(chunk)
            newlines += chunk.count(b"\n")
    return _first_lines(b"".join(chunks), max_lines)


def _first_lines(data: bytes, max_lines: int) -> bytes:
    """The first ``1 + max_lines`` lines of ``data`` (all of it when shorter)."""
    cut = -1
    for _ in range(max_lines + 1):
        cut = data.find(b"\n", cut + 1)
        if cut < 0:
            return data
    return data[: cut + 1]


def _looks_binary(head: bytes) -> bool:
    """A NUL byte, or many control bytes other than tab and line breaks, in the first bytes."""
    if b"\x00" in head:
        return True
    controls = sum(head.count(bytes([b])) for b in range(32) if b not in (9, 10, 12, 13))
    return controls > max(8, len(head) // 20)


def _header(text: str, path: Path) -> tuple[str, ...]:
    """The column names on line 1 (checked)."""
    first = text.splitlines()[0] if text else ""
    if not first.strip():
        raise CohortInputError(
            f"{path}: line 1 is blank; line 1 must be the header with the column names "
            "(remove the blank lines above it)"
        )
    if first.lstrip().startswith("#"):
        raise CohortInputError(
            f"{path}: line 1 starts with '#', but line 1 must be the header with the column names: riskbench "
            "reads no remark lines (a '#' at the start of a later line is data). Move the remark out of the file"
        )
    if first.count('"') % 2:
        raise CohortInputError(
            f"{path}: the header (line 1) has a quote that does not close; "
            "line 1 must hold the column names on one line"
        )
    names = tuple(next(csv.reader([first])))
    blank = [i + 1 for i, n in enumerate(names) if not n.strip()]
    if blank:
        raise CohortInputError(
            f"{path}: field {blank[0]} of the header (line 1) has no column name; the header reads {list(names)}"
        )
    seen: set[str] = set()
    repeated = sorted({n for n in names if n in seen or seen.add(n)})  # type: ignore[func-returns-value]
    if repeated:
        raise CohortInputError(
            f"{path}: the header (line 1) names column(s) {repeated} more than once; each column needs its own name"
        )
    return names


def _line_count(data: bytes) -> int | None:
    """Lines in UTF-8 bytes ending in ``\\n`` or ``\\r\\n``; None when a lone ``\\r`` ends some line."""
    if data.count(b"\r") != data.count(b"\r\n"):
        return None
    return data.count(b"\n") + (0 if data.endswith(b"\n") else 1)


def _read_fast(data: bytes, header: tuple[str, ...]) -> pa.Table | None:
    """Rows read by pyarrow when every line after the header is one well-formed record; else None."""
    lines = _line_count(data)
    if lines is None:
        return None
    bad: list[int] = []

    def invalid(row: pacsv.InvalidRow) -> str:
        bad.append(1)
        return "skip"

    try:
        table = pacsv.read_csv(
            pa.BufferReader(data),
            read_options=pacsv.ReadOptions(column_names=list(header), skip_rows=1),
            parse_options=pacsv.ParseOptions(
                newlines_in_values=True, ignore_empty_lines=True, invalid_row_handler=invalid
            ),
            convert_options=pacsv.ConvertOptions(
                column_types={n: pa.string() for n in header},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    if bad or table.num_rows != lines - 1:
        return None
    numbers = pa.array(np.arange(2, lines + 1, dtype=np.int64))
    return table.add_column(0, "row_number", numbers)


def _read_exact(text: str, header: tuple[str, ...], path: Path) -> CsvLines:
    """Every line after the header in order: a data row, a blank line or a line with the wrong field count."""
    n_fields = len(header)
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    columns: list[list[str]] = [[] for _ in header]
    numbers: list[int] = []
    other_numbers: list[int] = []
    other_states: list[str] = []
    blank, ragged = str(RowState.BLANK_LINE), str(RowState.WRONG_FIELD_COUNT)
    last = 0
    try:
        for record in reader:
            line, last = last + 1, reader.line_num
            if line == 1:
                continue  # the header, checked already
            if not record or (len(record) == 1 and not record[0].strip()):
                other_numbers.append(line)
                other_states.append(blank)
            elif len(record) != n_fields:
                other_numbers.append(line)
                other_states.append(ragged)
            else:
                numbers.append(line)
                for column, cell in zip(columns, record):
                    column.append(cell)
    except csv.Error as exc:
        raise CohortInputError(
            f"{path}: line {last + 1}: the quoting cannot be read ({exc}); a field that holds a comma, a quote "
            "or a line break must be enclosed in double quotes, with a quote inside written twice"
        ) from None
    rows = pa.table(
        {
            "row_number": pa.array(numbers, pa.int64()),
            **{name: pa.array(col, pa.string()) for name, col in zip(header, columns)},
        }
    )
    other = pa.table({"row_number": pa.array(other_numbers, pa.int64()), "state": pa.array(other_states, pa.string())})
    return CsvLines(header, rows, other)
