"""Input files → a stream of records.

A *record* is one molecule as the file gives it: a SMILES line, a CSV/TSV/Parquet row,
an SDF entry. Readers stream (one record in memory at a time) and never raise on a bad
record: a record that cannot be taken from the file comes out with ``kind == "error"``
and a reason, so that it ends up as a row of the errors table.

Accounting rules (documented in the README):

- SMILES files: a blank line, a ``#`` comment line and a first line whose first word is
  ``smiles`` (a header) are not records; they are counted as *skipped lines*. Every
  other line is a record.
- CSV/TSV: the header row and blank lines are not records; every other row is one.
- SDF: every ``$$$$``-terminated entry is a record, as is text left after the last
  ``$$$$`` (a truncated entry); whitespace-only entries are skipped lines.
- Parquet: every row is a record.

``input_row`` is the 0-based record number within its file (skipped lines do not
count), so it is the same whatever else the file contains.
"""

from __future__ import annotations

import csv
import gzip
import os
import re
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from typing import BinaryIO, NamedTuple

from libconf.pipeline.failures import FatalError, UsageError

#: Largest record text kept in the errors table's ``raw`` column.
RAW_LIMIT_BYTES = 10 * 1024
#: An SDF entry larger than this is reported, not loaded (a file missing its ``$$$$``
#: separators would otherwise be read into memory whole).
SDF_RECORD_LIMIT_BYTES = 32 * 1024 * 1024

FORMATS = {
    ".smi": "smiles",
    ".smiles": "smiles",
    ".txt": "smiles",
    ".csv": "csv",
    ".tsv": "tsv",
    ".sdf": "sdf",
    ".sd": "sdf",
    ".parquet": "parquet",
    ".pq": "parquet",
}

#: Header names taken as the SMILES / id column when none is given (case-insensitive),
#: best first.
SMILES_HEADERS = ("smiles", "canonical_smiles", "isomeric_smiles", "smi", "mol_smiles")
ID_HEADERS = (
    "mol_id",
    "id",
    "compound_id",
    "molecule_id",
    "name",
    "title",
    "identifier",
    "compound",
    "molecule",
    "cid",
    "zinc_id",
    "chembl_id",
)


class Record(NamedTuple):
    input_file: str
    input_row: int
    mol_id: str
    kind: str  # "smiles" | "molblock" | "error"
    text: str  # the SMILES or the molblock; for errors, empty
    raw: str  # record as found in the file (already truncated); "" when it is just `text`
    reason: str = ""  # for kind == "error"
    stage: str = ""  # for kind == "error": read


@dataclass
class InputSpec:
    """One input as given on the command line, resolved."""

    name: str  # as the user gave it ("-" for stdin); written to input_file
    path: str  # where to read it (a spool file for stdin)
    format: str  # smiles | csv | tsv | sdf | parquet
    compressed: bool
    stem: str  # for generated ids: "<stem>:<record number>"
    smiles_column: str | None = None  # resolved header names (csv/tsv/parquet/sdf field)
    id_column: str | None = None
    skipped_lines: int = 0  # filled in while reading
    records: int = 0
    extra: dict = field(default_factory=dict)

    @property
    def input_file(self) -> str:
        return "stdin" if self.name == "-" else self.name


def detect_format(name: str) -> tuple[str, bool, str]:
    """Return (format, compressed, stem) from a file name, or raise UsageError."""
    base = os.path.basename(name)
    compressed = base.lower().endswith(".gz")
    if compressed:
        base = base[:-3]
    stem, ext = os.path.splitext(base)
    fmt = FORMATS.get(ext.lower())
    if fmt is None:
        known = ", ".join(sorted(FORMATS))
        raise UsageError(
            f"{name}: cannot tell the file format from its name; use one of {known} "
            "(optionally followed by .gz)"
        )
    if fmt == "parquet" and compressed:
        raise UsageError(
            f"{name}: a gzipped Parquet file cannot be streamed; Parquet compresses its "
            "own pages, so give the .parquet file itself"
        )
    return fmt, compressed, stem


def open_binary(spec: InputSpec) -> BinaryIO:
    try:
        if spec.compressed:
            return gzip.open(spec.path, "rb")  # type: ignore[return-value]
        return open(spec.path, "rb")
    except OSError as exc:
        raise FatalError(f"cannot open input file {spec.name}: {exc.strerror or exc}") from exc


def truncate_raw(text: str) -> str:
    if len(text) * 4 <= RAW_LIMIT_BYTES:  # no character takes more than 4 bytes in UTF-8
        return text
    data = text.encode("utf-8", "replace")
    if len(data) <= RAW_LIMIT_BYTES:
        return text
    return data[:RAW_LIMIT_BYTES].decode("utf-8", "ignore")


def _raw_unless_text(raw: str, text: str) -> str:
    """The raw record for `Record.raw`; empty when it is the SMILES itself (most lines of a
    one-column file), which spares sending the same string twice to a worker."""
    return "" if raw == text else truncate_raw(raw)


def _decode(line: bytes, lineno: int) -> tuple[str, str | None]:
    """Decode one line; on bad bytes return the replaced text and a reason."""
    try:
        return line.decode("utf-8"), None
    except UnicodeDecodeError as exc:
        bad = line[exc.start]
        reason = (
            f"line {lineno} is not valid UTF-8 text (byte 0x{bad:02X} at column "
            f"{exc.start + 1}); save the file as UTF-8"
        )
        return line.decode("utf-8", "replace"), reason


def _strip_eol(text: str) -> str:
    return text.rstrip("\r\n")


def _read_error(spec: InputSpec, exc: Exception) -> FatalError:
    return FatalError(
        f"cannot read input file {spec.name}: {exc}; the file is damaged or not in the "
        f"{spec.format} format its name says"
    )


def _lines(spec: InputSpec, fh: BinaryIO) -> Iterator[tuple[int, bytes]]:
    """(1-based line number, line bytes); read failures become FatalError."""
    lineno = 0
    try:
        for line in fh:
            lineno += 1
            if lineno == 1 and line.startswith(b"\xef\xbb\xbf"):
                line = line[3:]
            yield lineno, line
    except (OSError, EOFError, gzip.BadGzipFile) as exc:
        raise _read_error(spec, exc) from exc


#: Bytes read from a (decompressed) text input at a time.
_BLOCK_BYTES = 1 << 20
_BOM = b"\xef\xbb\xbf"


def _text_lines(spec: InputSpec, fh: BinaryIO) -> Iterator[tuple[int, str, str | None]]:
    """(1-based line number, line text without its ``\\n``, reason if the line had bytes
    that are not UTF-8) for a text input.

    The same lines as iterating the binary file and decoding each (``_lines``,
    ``_decode``), read a block at a time and decoded a block at a time: a line-by-line
    read and decode cost more than half of the main process's time on a large file. A
    block that does not decode is decoded line by line, so a bad line gets its own reason.
    """
    lineno = 0
    rest = b""
    first = True
    try:
        while True:
            block = fh.read(_BLOCK_BYTES)
            if not block:
                break
            end = block.rfind(b"\n")
            if end < 0:
                rest += block
                continue
            whole, rest = rest + block[:end], block[end + 1 :]
            if first:  # the first line, whole: drop a UTF-8 byte-order mark
                first = False
                whole = whole[3:] if whole.startswith(_BOM) else whole
            try:
                texts = whole.decode("utf-8").split("\n")
            except UnicodeDecodeError:
                for raw in whole.split(b"\n"):
                    lineno += 1
                    text, bad = _decode(raw, lineno)
                    yield lineno, text, bad
                continue
            for text in texts:
                lineno += 1
                yield lineno, text, None
        if rest:
            if first:
                rest = rest[3:] if rest.startswith(_BOM) else rest
            lineno += 1
            text, bad = _decode(rest, lineno)
            yield lineno, text, bad
    except (OSError, EOFError, gzip.BadGzipFile) as exc:
        raise _read_error(spec, exc) from exc


def read_records(spec: InputSpec) -> Iterator[Record]:
    """Stream the records of one input (see the module docstring for what counts)."""
    readers = {
        "smiles": _read_smiles,
        "csv": _read_delimited,
        "tsv": _read_delimited,
        "sdf": _read_sdf,
        "parquet": _read_parquet,
    }
    spec.skipped_lines = 0
    spec.records = 0
    for rec in readers[spec.format](spec):
        spec.records += 1
        yield rec


def _default_id(spec: InputSpec, row: int) -> str:
    return f"{spec.stem}:{row}"


def _error(spec: InputSpec, row: int, mol_id: str, raw: str, reason: str) -> Record:
    return Record(spec.input_file, row, mol_id, "error", "", truncate_raw(raw), reason, "read")


# --- SMILES files -----------------------------------------------------------------------


def _read_smiles(spec: InputSpec) -> Iterator[Record]:
    row = 0
    seen_content = False
    with open_binary(spec) as fh:
        for _, text, bad in _text_lines(spec, fh):
            text = _strip_eol(text)
            stripped = text.strip()
            if not stripped or stripped.startswith("#"):
                spec.skipped_lines += 1
                continue
            parts = stripped.split(None, 1)
            if not seen_content and bad is None and parts[0].lower() in ("smiles", "smi"):
                seen_content = True
                spec.skipped_lines += 1  # a header line naming the columns
                continue
            seen_content = True
            mol_id = parts[1].strip() if len(parts) > 1 else ""
            if bad is not None:
                yield _error(spec, row, _default_id(spec, row), text, bad)
            else:
                yield Record(
                    spec.input_file,
                    row,
                    mol_id or _default_id(spec, row),
                    "smiles",
                    parts[0],
                    _raw_unless_text(text, parts[0]),
                )
            row += 1


# --- CSV / TSV --------------------------------------------------------------------------


class _LineFeed:
    """Decoded lines for csv.reader, remembering the raw text and bad bytes of a row.

    ``lines`` is shared with the caller, which may take plain lines itself and hand one
    back (``push``) for csv.reader to parse, together with any continuation lines a
    quoted field needs."""

    def __init__(self, spec: InputSpec, fh: BinaryIO) -> None:
        self.lines = _text_lines(spec, fh)
        self.pending: list[str] = []
        self.bad: str | None = None
        self._pushed: tuple[str, str | None] | None = None

    def __iter__(self) -> _LineFeed:
        return self

    def push(self, text: str, bad: str | None) -> None:
        self._pushed = (text, bad)

    def __next__(self) -> str:
        if self._pushed is not None:
            (text, bad), self._pushed = self._pushed, None
        else:
            _, text, bad = next(self.lines)
        if bad is not None and self.bad is None:
            self.bad = bad
        text += "\n"
        self.pending.append(text)
        return text

    def take(self) -> tuple[str, str | None]:
        raw = "".join(self.pending).rstrip("\r\n")
        bad = self.bad
        self.pending = []
        self.bad = None
        return raw, bad


def _pick_column(
    header: list[str],
    wanted: str | None,
    candidates: Iterable[str],
    what: str,
    spec: InputSpec,
    option: str,
) -> int | None:
    names = [h.strip() for h in header]
    lower = [h.lower() for h in names]
    if wanted is not None:
        if wanted in names:
            return names.index(wanted)
        if wanted.lower() in lower:
            return lower.index(wanted.lower())
        raise UsageError(
            f"{spec.name}: no column named {wanted!r} for {option}; the columns are "
            + ", ".join(repr(n) for n in names)
        )
    for cand in candidates:
        if cand in lower:
            return lower.index(cand)
    if what == "smiles":
        for i, h in enumerate(lower):
            if "smiles" in h:
                return i
        raise UsageError(
            f"{spec.name}: cannot find the SMILES column among "
            + ", ".join(repr(n) for n in names)
            + f"; name it with {option}"
        )
    return None


def _delimiter(spec: InputSpec) -> str:
    return "\t" if spec.format == "tsv" else ","


def _csv_reader(feed: _LineFeed, spec: InputSpec):
    # Huge fields (a pasted molblock, say) must become error rows, not a crash.
    csv.field_size_limit(max(csv.field_size_limit(), 64 * 1024 * 1024))
    return csv.reader(feed, delimiter=_delimiter(spec))


def probe_columns(spec: InputSpec, smiles_column: str | None, id_column: str | None) -> None:
    """Resolve the SMILES / id columns from the header (raises UsageError)."""
    if spec.format in ("csv", "tsv"):
        with open_binary(spec) as fh:
            feed = _LineFeed(spec, fh)
            try:
                header = next(r for r in _csv_reader(feed, spec) if r)
            except StopIteration:
                header = None
            except csv.Error as exc:
                raise _read_error(spec, exc) from exc
        if header is None:
            spec.smiles_column, spec.id_column = smiles_column, id_column
            return
    elif spec.format == "parquet":
        header = _parquet_schema_names(spec)
    elif spec.format == "sdf":
        if smiles_column is not None:
            raise UsageError(f"{spec.name}: --smiles-column does not apply to SDF input")
        spec.id_column = id_column  # an SDF data field; the title line when not given
        return
    else:
        return
    s = _pick_column(header, smiles_column, SMILES_HEADERS, "smiles", spec, "--smiles-column")
    i = _pick_column(header, id_column, ID_HEADERS, "id", spec, "--id-column")
    spec.smiles_column = header[s].strip() if s is not None else None
    spec.id_column = header[i].strip() if i is not None else None


def _read_delimited(spec: InputSpec) -> Iterator[Record]:
    row = 0
    with open_binary(spec) as fh:
        feed = _LineFeed(spec, fh)
        reader = _csv_reader(feed, spec)
        header: list[str] | None = None
        s_idx = i_idx = None
        delimiter = _delimiter(spec)
        for _, text, bad in feed.lines:
            # Most lines hold no quote, NUL or stray carriage return: split them here. The
            # rest go to csv.reader, which also takes the continuation lines of a quoted
            # field with a line break in it.
            plain = text[:-1] if text.endswith("\r") else text
            if '"' in plain or "\r" in plain or "\x00" in plain:
                feed.push(text, bad)
                try:
                    fields = next(reader)
                except StopIteration:
                    break
                except csv.Error as exc:
                    raw, bad = feed.take()
                    yield _error(
                        spec,
                        row,
                        _default_id(spec, row),
                        raw,
                        f"row could not be split into columns ({exc})",
                    )
                    row += 1
                    continue
                raw, bad = feed.take()
            else:
                fields, raw = plain.split(delimiter), plain
            smiles = fields[s_idx].strip() if header is not None and s_idx < len(fields) else ""
            # a row with a SMILES is not blank; only the others need the whole-row test
            if not smiles and (not fields or all(not f.strip() for f in fields)):
                spec.skipped_lines += 1
                continue
            if header is None:
                header = [f.strip() for f in fields]
                lower = [h.lower() for h in header]
                s_idx = lower.index(spec.smiles_column.lower()) if spec.smiles_column else None
                i_idx = lower.index(spec.id_column.lower()) if spec.id_column else None
                if s_idx is None:
                    probe_columns(spec, None, None)  # raises with the column list
                spec.skipped_lines += 1
                continue
            mol_id = fields[i_idx].strip() if i_idx is not None and i_idx < len(fields) else ""
            mol_id = mol_id or _default_id(spec, row)
            if bad is not None:
                yield _error(spec, row, mol_id, raw, bad)
            elif s_idx >= len(fields):
                yield _error(
                    spec,
                    row,
                    mol_id,
                    raw,
                    f"row has {len(fields)} columns, so no value in the SMILES column "
                    f"{header[s_idx]!r} (column {s_idx + 1})",
                )
            elif not smiles:
                yield _error(spec, row, mol_id, raw, f"empty SMILES in column {header[s_idx]!r}")
            else:
                yield Record(spec.input_file, row, mol_id, "smiles", smiles, _raw_unless_text(raw, smiles))
            row += 1


# --- SDF --------------------------------------------------------------------------------

_DATA_HEADER = re.compile(r"^>.*<([^>]*)>")


def _sdf_field(lines: list[str], name: str) -> str:
    for k, line in enumerate(lines):
        m = _DATA_HEADER.match(line)
        if m and m.group(1).strip().lower() == name.lower() and k + 1 < len(lines):
            return lines[k + 1].strip()
    return ""


def _sdf_record(
    spec: InputSpec, row: int, chunks: list[bytes], first_line: int, terminated: bool, oversize: bool
) -> Record:
    data = b"".join(chunks)
    try:
        text = data.decode("utf-8")
        bad = None
    except UnicodeDecodeError as exc:
        text = data.decode("utf-8", "replace")
        line_in = data[: exc.start].count(b"\n")
        bad = (
            f"SDF entry starting on line {first_line} is not valid UTF-8 text (byte "
            f"0x{data[exc.start]:02X} on line {first_line + line_in}); save the file as UTF-8"
        )
    lines = text.splitlines()
    title = lines[0].strip() if lines else ""
    if spec.id_column:
        mol_id = _sdf_field(lines, spec.id_column) or _default_id(spec, row)
    else:
        mol_id = title or _default_id(spec, row)
    if oversize:
        return _error(
            spec,
            row,
            mol_id,
            text,
            f"SDF entry starting on line {first_line} is larger than "
            f"{SDF_RECORD_LIMIT_BYTES // (1024 * 1024)} MB (a missing $$$$ separator?)",
        )
    if bad is not None:
        return _error(spec, row, mol_id, text, bad)
    if not any(line.startswith("M  END") for line in lines):
        where = "the file ends" if not terminated else "its $$$$ separator"
        return _error(
            spec,
            row,
            mol_id,
            text,
            f"SDF entry starting on line {first_line} has no 'M  END' line before {where}"
            + ("; the file looks truncated" if not terminated else ""),
        )
    return Record(spec.input_file, row, mol_id, "molblock", text, "")


def _read_sdf(spec: InputSpec) -> Iterator[Record]:
    row = 0
    chunks: list[bytes] = []
    size = 0
    oversize = False
    first_line = 1
    with open_binary(spec) as fh:
        for lineno, line in _lines(spec, fh):
            if line.rstrip(b"\r\n ") == b"$$$$":
                if size == 0 or not b"".join(chunks).strip():
                    spec.skipped_lines += 1
                else:
                    yield _sdf_record(spec, row, chunks, first_line, True, oversize)
                    row += 1
                chunks, size, oversize, first_line = [], 0, False, lineno + 1
                continue
            size += len(line)
            if size <= SDF_RECORD_LIMIT_BYTES:
                chunks.append(line)
            elif not oversize:
                oversize = True
        if chunks and b"".join(chunks).strip():
            yield _sdf_record(spec, row, chunks, first_line, False, oversize)
        elif chunks:
            spec.skipped_lines += 1


# --- Parquet ----------------------------------------------------------------------------


def _parquet_file(spec: InputSpec):
    import pyarrow.parquet as pq

    try:
        return pq.ParquetFile(spec.path)
    except OSError as exc:
        raise FatalError(f"cannot open input file {spec.name}: {exc}") from exc
    except Exception as exc:  # pyarrow raises ArrowInvalid for a non-Parquet file
        raise _read_error(spec, exc) from exc


def _parquet_schema_names(spec: InputSpec) -> list[str]:
    return list(_parquet_file(spec).schema_arrow.names)


def _read_parquet(spec: InputSpec) -> Iterator[Record]:
    pf = _parquet_file(spec)
    columns = [spec.smiles_column] + ([spec.id_column] if spec.id_column else [])
    row = 0
    try:
        for batch in pf.iter_batches(batch_size=4096, columns=columns):
            smiles = batch.column(0).to_pylist()
            ids = batch.column(1).to_pylist() if spec.id_column else [None] * len(smiles)
            for smi, ident in zip(smiles, ids, strict=True):
                mol_id = "" if ident is None else str(ident).strip()
                mol_id = mol_id or _default_id(spec, row)
                raw = f"{smi}" + (f" {ident}" if ident is not None else "")
                if smi is None or not str(smi).strip():
                    yield _error(
                        spec, row, mol_id, raw, f"no SMILES in column {spec.smiles_column!r} (empty or null)"
                    )
                elif not isinstance(smi, str):
                    yield _error(
                        spec,
                        row,
                        mol_id,
                        raw,
                        f"column {spec.smiles_column!r} holds {type(smi).__name__} values, not SMILES text",
                    )
                else:
                    yield Record(spec.input_file, row, mol_id, "smiles", smi.strip(), truncate_raw(raw))
                row += 1
    except OSError as exc:
        raise _read_error(spec, exc) from exc
    except Exception as exc:
        if exc.__class__.__module__.startswith("pyarrow"):
            raise _read_error(spec, exc) from exc
        raise


def estimate_records(spec: InputSpec) -> int | None:
    """A cheap upper estimate of the record count, for the progress bar's ETA."""
    if spec.format == "parquet":
        return _parquet_file(spec).metadata.num_rows
    needle = b"$$$$" if spec.format == "sdf" else b"\n"
    n = 0
    with open_binary(spec) as fh:
        try:
            while block := fh.read(1 << 20):
                n += block.count(needle)
        except (OSError, EOFError, gzip.BadGzipFile) as exc:
            raise _read_error(spec, exc) from exc
    if spec.format in ("csv", "tsv"):
        n = max(n - 1, 0)
    return n


__all__ = [
    "InputSpec",
    "Record",
    "detect_format",
    "estimate_records",
    "probe_columns",
    "read_records",
    "truncate_raw",
]
