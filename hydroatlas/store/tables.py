"""Reading input tables (CSV) into string columns, with errors that name file, row and column.

Rows are numbered from 1 for the first data row; the file line is row + 1.
Every value is read as text first so that each conversion can say exactly
which cell it could not read.

Reading is strict: a row with more or fewer fields than the header, a repeated
header name or a NUL byte refuses the file. Every cell is trimmed of Unicode
white space (non-breaking spaces included) and put in Unicode normal form C,
so that ids that differ only in padding or in how an accent is encoded are
one id.
"""

from __future__ import annotations

import csv
import io
import itertools
import re
import unicodedata
from pathlib import Path
from typing import Iterator

import numpy as np
import pandas as pd

from ..errors import ImportDataError


def read_csv_table(path: str | Path, *, required: tuple[str, ...], label: str | None = None) -> pd.DataFrame:
    """Read a comma-separated UTF-8 file with a header row into a frame of stripped strings.

    The returned frame has a ``source_row`` column (1-based data row).
    """
    path = Path(path)
    name = label or path.name
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise ImportDataError("file not found", file=name) from None
    except OSError as exc:
        raise ImportDataError(f"cannot read the file ({exc.strerror})", file=name) from None
    if not raw.strip():
        raise ImportDataError("the file is empty; a header row and at least one data row are expected", file=name)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise ImportDataError(
            f"byte {exc.start} is not valid UTF-8 (0x{raw[exc.start]:02x}); save the file as UTF-8",
            file=name, row=line - 1 if line > 1 else None) from None
    nul = text.find("\x00")
    if nul >= 0:
        line = text.count("\n", 0, nul) + 1
        raise ImportDataError("the file holds a NUL byte (a binary or damaged file?); save it as plain UTF-8 CSV",
                              file=name, row=line - 1)
    header_line = text.splitlines()[0]
    _check_delimiter(header_line, name)
    _check_field_counts(text, name)
    try:
        frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, na_filter=False,
                            skip_blank_lines=True, quoting=csv.QUOTE_MINIMAL, index_col=False)
    except pd.errors.ParserError as exc:
        msg = str(exc)
        line = _line_from_parser_message(msg)
        raise ImportDataError(f"cannot parse the row ({msg.strip()})", file=name,
                              row=line - 1 if line else None) from None
    except pd.errors.EmptyDataError:
        raise ImportDataError("the file is empty; a header row is expected", file=name) from None
    columns = [normalize_text(str(c)) for c in frame.columns]
    # pandas renames a repeated header 'a' to 'a.1': compare the header as written
    written = [normalize_text(c) for c in next(csv.reader(io.StringIO(header_line)))]
    dupes = sorted({c for c in written if written.count(c) > 1})
    if dupes:
        raise ImportDataError(f"the header repeats column(s) {', '.join(dupes)}; each column name may appear once",
                              file=name, row=0, column=dupes[0])
    blank = [i for i, c in enumerate(written) if not c]
    if blank:
        raise ImportDataError(f"header column {blank[0] + 1} has no name", file=name, row=0)
    columns = written if len(written) == len(columns) else columns
    frame.columns = columns
    missing = [c for c in required if c not in columns]
    if missing:
        raise ImportDataError(
            f"missing required column(s) {', '.join(missing)}; the header has {', '.join(columns)}",
            file=name, row=0, column=missing[0])
    if frame.empty:
        raise ImportDataError("the file has a header but no data rows", file=name)
    # Trimming every cell costs more than parsing; do it only when the text may hold padded or non-ASCII cells.
    if not text.isascii():
        for c in frame.columns:
            frame[c] = frame[c].map(normalize_text)
    elif _is_padded(text):
        for c in frame.columns:
            frame[c] = frame[c].str.strip()
    frame["source_row"] = np.arange(1, len(frame) + 1)
    return frame


#: data rows per piece of a streamed file (:func:`iter_csv_chunks`)
CHUNK_ROWS = 200_000


def iter_csv_chunks(path: str | Path, *, required: tuple[str, ...], label: str | None = None,
                    chunk_rows: int = CHUNK_ROWS) -> Iterator[pd.DataFrame]:
    """:func:`read_csv_table` in pieces of about ``chunk_rows`` data rows, never holding the whole file.

    Each piece is a frame of stripped strings with the file's header columns and ``source_row`` (the file's
    own 1-based data rows, counted across pieces). The header is checked first, then each piece with the
    same checks and messages as :func:`read_csv_table` (UTF-8, NUL bytes, field counts, parsing, trimming);
    a piece ends at a line end outside quotes, so a quoted value holding line breaks stays whole. A file
    whose first line is blank, or holds an unclosed quote or a bare carriage return, is read whole by
    :func:`read_csv_table` and given as one piece. ImportDataError names file and row.
    """
    path = Path(path)
    name = label or path.name
    chunk_rows = max(int(chunk_rows), 1)
    try:
        fh = path.open("rb")
    except FileNotFoundError:
        raise ImportDataError("file not found", file=name) from None
    except OSError as exc:
        raise ImportDataError(f"cannot read the file ({exc.strerror})", file=name) from None
    with fh:
        first = fh.readline()
        whole = (not first.strip() or first.count(b'"') % 2 or b"\r" in first.rstrip(b"\r\n"))
        if not whole:
            try:
                header_text = first.decode("utf-8-sig")
            except UnicodeDecodeError:
                whole = True  # read_csv_table words the message
        if whole or "\x00" in header_text:
            yield read_csv_table(path, required=required, label=label)
            return
        header_line = header_text.splitlines()[0]
        _check_delimiter(header_line, name)
        written = [normalize_text(c) for c in next(csv.reader(io.StringIO(header_line)))]
        dupes = sorted({c for c in written if written.count(c) > 1})
        if dupes:
            raise ImportDataError(f"the header repeats column(s) {', '.join(dupes)}; each column name may appear "
                                  "once", file=name, row=0, column=dupes[0])
        blank = [i for i, c in enumerate(written) if not c]
        if blank:
            raise ImportDataError(f"header column {blank[0] + 1} has no name", file=name, row=0)
        missing = [c for c in required if c not in written]
        if missing:
            raise ImportDataError(
                f"missing required column(s) {', '.join(missing)}; the header has {', '.join(written)}",
                file=name, row=0, column=missing[0])
        byte_pos, lines_before, rows_before = len(first), 1, 0
        while True:
            lines = list(itertools.islice(fh, chunk_rows))
            if not lines:
                break
            odd = sum(line.count(b'"') for line in lines) % 2
            while odd:  # a quoted value goes on past the piece's last line: take lines until the quote closes
                more = fh.readline()
                if not more:
                    break
                lines.append(more)
                odd ^= more.count(b'"') % 2
            block = b"".join(lines)
            del lines
            try:
                text = block.decode("utf-8")
            except UnicodeDecodeError as exc:
                line = lines_before + block[:exc.start].count(b"\n") + 1
                raise ImportDataError(
                    f"byte {byte_pos + exc.start} is not valid UTF-8 (0x{block[exc.start]:02x}); save the file as "
                    "UTF-8", file=name, row=line - 1) from None
            nul = text.find("\x00")
            if nul >= 0:
                line = lines_before + text.count("\n", 0, nul) + 1
                raise ImportDataError("the file holds a NUL byte (a binary or damaged file?); save it as plain "
                                      "UTF-8 CSV", file=name, row=line - 1)
            piece = header_line + "\n" + text
            _check_field_counts(piece, name, row_offset=rows_before, line_offset=lines_before - 1)
            try:
                frame = pd.read_csv(io.StringIO(piece), dtype=str, keep_default_na=False, na_filter=False,
                                    skip_blank_lines=True, quoting=csv.QUOTE_MINIMAL, index_col=False)
            except pd.errors.ParserError as exc:
                msg = str(exc)
                line = _line_from_parser_message(msg)
                raise ImportDataError(f"cannot parse the row ({msg.strip()})", file=name,
                                      row=line - 1 + lines_before - 1 if line else None) from None
            del piece
            frame.columns = written
            if not text.isascii():
                for c in frame.columns:
                    frame[c] = frame[c].map(normalize_text)
            elif _is_padded(text):
                for c in frame.columns:
                    frame[c] = frame[c].str.strip()
            byte_pos += len(block)
            lines_before += block.count(b"\n")
            del block, text
            if frame.empty:
                continue
            frame["source_row"] = np.arange(rows_before + 1, rows_before + len(frame) + 1)
            rows_before += len(frame)
            yield frame
        if rows_before == 0:
            raise ImportDataError("the file has a header but no data rows", file=name)


def normalize_text(value: str) -> str:
    """A cell as stored: Unicode white space trimmed at both ends (non-breaking spaces too), NFC form."""
    return unicodedata.normalize("NFC", value.strip())


def _check_delimiter(header_line: str, name: str) -> None:
    """Refuse a header written with another delimiter than the comma, naming it."""
    if "," not in header_line:
        for delim, word in ((";", "semicolon"), ("\t", "tab"), ("|", "pipe")):
            if delim in header_line:
                raise ImportDataError(
                    f"the file is {word}-delimited; hydroatlas reads comma-separated files "
                    "(re-save it as CSV with commas)", file=name, row=0)


def _check_field_counts(text: str, name: str, *, row_offset: int = 0, line_offset: int = 0) -> None:
    """Refuse a row with more or fewer fields than the header (pandas would shift or pad it silently).

    ``text`` is the header line and data lines; ``row_offset`` data rows and ``line_offset`` file lines
    come before its data lines in the file (a piece of a streamed file)."""
    if '"' not in text and "\r" not in text:
        # no quoting: a row's field count is its comma count + 1, counted for every line at once
        data = np.frombuffer(text.encode("utf-8"), dtype=np.uint8)
        ends = np.flatnonzero(data == 10)
        if len(data) and data[-1] != 10:
            ends = np.append(ends, len(data))
        starts = np.concatenate([[0], ends[:-1] + 1])
        blank = ends == starts
        line_of_comma = np.searchsorted(ends, np.flatnonzero(data == 44))
        fields = np.bincount(line_of_comma, minlength=len(ends))[:len(ends)] + 1
        width = fields[0]
        bad = (fields != width) & ~blank
        bad[0] = False
        if not bad.any():
            return
    try:
        reader = csv.reader(io.StringIO(text), strict=True)
        header = next(reader)
        width = len(header)
        row = 0
        for fields in reader:
            if not fields:
                continue  # blank line: skipped by the reader below as well
            row += 1
            if len(fields) != width:
                more = "more" if len(fields) > width else "fewer"
                hint = (" (an unquoted comma inside a value? quote the value)" if more == "more"
                        else " (a missing value? leave the cell empty with its comma)")
                raise ImportDataError(f"the row has {len(fields)} fields, {more} than the header's {width}{hint}",
                                      file=name, row=row + row_offset)
    except csv.Error as exc:
        raise ImportDataError(f"cannot parse the row ({exc})", file=name,
                              row=max(reader.line_num - 1, 0) + line_offset) from None


def _is_padded(text: str) -> bool:
    """True when some cell may start or end with a blank, quoted or not (substring tests run at C speed)."""
    return (" ," in text or ", " in text or " \n" in text or "\n " in text or "\t" in text or '" ' in text
            or ' "' in text or " \r" in text or text.startswith(" ") or text.rstrip("\r\n").endswith(" "))


def _line_from_parser_message(msg: str) -> int | None:
    m = re.search(r"line (\d+)", msg)
    return int(m.group(1)) if m else None


class Cells:
    """Typed access to the string columns of one input file, raising on the first bad cell."""

    def __init__(self, frame: pd.DataFrame, file: str):
        self.frame = frame
        self.file = file
        self.rows = frame["source_row"].to_numpy()

    def fail(self, mask, column: str | None, message: str, *, param: str | tuple[str, ...] | None = None):
        """Raise ImportDataError at the first row where ``mask`` is true (if any); ``param``: the parameter(s)
        the message names (``input_crs=``)."""
        mask = np.asarray(mask, dtype=bool)
        if mask.any():
            first = int(np.flatnonzero(mask)[0])
            more = int(mask.sum()) - 1
            extra = f" ({more} more row{'s' if more != 1 else ''} like this)" if more else ""
            raise ImportDataError(message + extra, file=self.file, row=int(self.rows[first]), column=column,
                                  param=param)

    def has(self, column: str) -> bool:
        return column in self.frame.columns

    def text(self, column: str, *, required: bool = True, default: str | None = None) -> pd.Series:
        if column not in self.frame.columns:
            return pd.Series([default] * len(self.frame), index=self.frame.index, dtype=object)
        values = self.frame[column]
        empty = (values == "").to_numpy()
        if required:
            self.fail(empty, column, "empty value; this column is required")
        return values.astype(object).where(~empty, default)

    def number(self, column: str, *, required: bool = True, positive: bool = False,
               nonnegative: bool = False) -> np.ndarray:
        if column not in self.frame.columns:
            return np.full(len(self.frame), np.nan)
        raw = self.frame[column]
        empty = (raw == "").to_numpy()
        if required:
            self.fail(empty, column, "empty value; a number is required")
        values = pd.to_numeric(raw.where(~empty, None), errors="coerce").to_numpy(dtype=float)
        bad_text = np.isnan(values) & ~empty
        if bad_text.any():
            first = int(np.flatnonzero(bad_text)[0])
            self.fail(bad_text, column, f"{raw.iloc[first]!r} is not a number")
        self.fail(np.isinf(values), column, "the value is not finite")
        if positive:
            self.fail(values <= 0, column, "the value must be greater than zero")
        if nonnegative:
            self.fail(values < 0, column, "the value must not be negative")
        return values

    def choice(self, column: str, allowed: tuple[str, ...], *, required: bool = True,
               default: str | None = None, aliases: dict[str, str] | None = None) -> pd.Series:
        values = self.text(column, required=required, default=default)
        lowered = values.where(values.isna(), values.astype(str).str.lower()) if len(values) else values
        if aliases:
            lowered = lowered.replace(aliases)
        present = lowered.notna().to_numpy()
        bad = present & ~lowered.isin(allowed).to_numpy()
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            self.fail(bad, column, f"{values.iloc[first]!r} is not one of {', '.join(allowed)}")
        return lowered

    def timestamp(self, column: str, *, required: bool = True, date_only: bool = False) -> pd.Series:
        """ISO 8601 text, normalised to 'YYYY-MM-DDTHH:MM:SS' (or 'YYYY-MM-DD'); offsets go to UTC."""
        values = self.text(column, required=required)
        present = values.notna().to_numpy()
        out = pd.Series([None] * len(values), index=values.index, dtype=object)
        if not present.any():
            return out
        sub = values[present].astype(str)
        parsed = pd.to_datetime(sub, format="ISO8601", errors="coerce", utc=True)
        # a bare year or year-month is a period, not a date: refuse it rather than read it as the 1st of January
        bad = parsed.isna().to_numpy() | (sub.str.len().to_numpy() < 10) | (sub.str.slice(4, 5) != "-").to_numpy()
        if bad.any():
            mask = np.zeros(len(values), dtype=bool)
            mask[np.flatnonzero(present)[bad]] = True
            first = int(np.flatnonzero(bad)[0])
            self.fail(mask, column, f"{sub.iloc[first]!r} is not an ISO 8601 date or time (YYYY-MM-DD[THH:MM[:SS]]; "
                      "a bare year or month is not a date)")
        stamps = parsed.dt.tz_localize(None).to_numpy().astype("datetime64[s]")
        text = np.datetime_as_string(stamps, unit="D" if date_only else "s").astype(object)
        if present.all():
            return pd.Series(text, index=values.index, dtype=object)
        out[present] = text
        return out

    def attrs(self, known: set[str], *, clear_empty: bool = False) -> pd.Series:
        """Extra columns as a JSON object per row (None where there are none).

        An empty cell is left out, so that the stored value of that attribute is kept;
        with ``clear_empty`` it is written as null, which removes the stored attribute.
        """
        import json

        extra = [c for c in self.frame.columns if c not in known and c != "source_row"]
        if not extra:
            return pd.Series([None] * len(self.frame), index=self.frame.index, dtype=object)
        sub = self.frame[extra]
        out = []
        for row in sub.itertuples(index=False, name=None):
            obj = {c: (v if v != "" else None) for c, v in zip(extra, row) if v != "" or clear_empty}
            out.append(json.dumps(obj, ensure_ascii=False) if obj else None)
        return pd.Series(out, index=self.frame.index, dtype=object)
