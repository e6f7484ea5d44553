"""Data contracts: read a raw CSV, check it against a declared contract, return typed data.

A contract is a small YAML document (``format: oddsmith-contract/1``) listing each column,
its type (string, integer, float, date, category), whether it may be empty, whether it
must be unique, its range or its levels. Checks run lazily: every failing column and check
is reported at once with the number of failing rows and a few example row ids and values.
Typing is done here; the value checks run through a pandera schema built from the file.
"""

from __future__ import annotations

import codecs
import csv
import math
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pandera.pandas as pa

from oddsmith.errors import ArgumentError, ContractError, quoted
from oddsmith.io import read_yaml

CONTRACT_FORMAT = "oddsmith-contract/1"
COLUMN_TYPES = ("string", "integer", "float", "date", "category")
COLUMN_KEYS = {"type", "nullable", "unique", "min", "max", "levels", "description", "required"}
EXAMPLES = 3


def load_contract(path: str | Path) -> dict:
    """Read and check a contract file; raise ContractError listing every problem in it."""
    doc = read_yaml(path, what="data contract", error=ContractError)
    problems = _contract_problems(doc)
    if problems:
        raise ContractError(f"data contract {path} is malformed", problems)
    for spec in doc["columns"].values():
        spec.setdefault("nullable", False)
        spec.setdefault("unique", False)
        spec.setdefault("required", True)
    return doc


def _contract_problems(doc) -> list[str]:
    if not isinstance(doc, dict) or doc.get("format") != CONTRACT_FORMAT:
        found = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
        return [f"format: expected '{CONTRACT_FORMAT}', found {quoted(found)}"]
    if not isinstance(doc.get("columns"), dict) or not doc["columns"]:
        return ["columns: expected a mapping of column name to its declaration"]
    problems = []
    for name, spec in doc["columns"].items():
        if not isinstance(spec, dict):
            problems.append(f"columns.{name}: expected a mapping, found {quoted(spec)}")
            continue
        unknown = sorted(set(spec) - COLUMN_KEYS)
        if unknown:
            problems.append(f"columns.{name}: unknown key(s) {unknown}; allowed: {sorted(COLUMN_KEYS)}")
        if spec.get("type") not in COLUMN_TYPES:
            problems.append(f"columns.{name}.type: expected one of {list(COLUMN_TYPES)}, found {quoted(spec.get('type'))}")
        if spec.get("type") == "category" and not spec.get("levels"):
            problems.append(f"columns.{name}: a category column needs a non-empty 'levels' list")
    return problems


#: Rows per piece when a file is read and checked piece by piece (the validate stage): the
#: text of one piece, its typed copy and the checks' temporaries are all that is held at once.
PIECE_ROWS = 32_768


def read_raw(path: str | Path, *, encoding: str = "utf-8") -> pd.DataFrame:
    """Read a CSV as text cells (empty cell = missing), with clear errors for unusable files.

    A UTF-8 byte-order mark is accepted. A file that does not decode in ``encoding`` is
    refused with the offset of the first bad byte. The whole file is held as text; the
    validate stage reads it in pieces instead (:func:`read_raw_pieces`).
    """
    (whole,) = _raw_pieces(path, encoding=encoding, rows=None, columns=None)  # one piece, checks run to the end
    return whole


def read_raw_pieces(path: str | Path, *, encoding: str = "utf-8", rows: int = PIECE_ROWS,
                    columns: list[str] | None = None):
    """Read a CSV as :func:`read_raw` does, in pieces of at most ``rows`` rows.

    Yields DataFrames of text cells whose index continues across pieces (row ``i`` of the
    file's data has index ``i``). The file is refused with the same messages as
    :func:`read_raw`; a ragged row is reported when the piece holding it is read, with its
    line in the file. ``columns`` reads only those columns (a second look at a few columns).
    Every piece carries the header as written in ``attrs["header"]``.
    """
    if rows is None or rows < 1:
        raise ArgumentError(f"rows must be a positive number of rows, found {rows!r}")
    return _raw_pieces(path, encoding=encoding, rows=rows, columns=columns)


def _raw_pieces(path, *, encoding: str, rows: int | None, columns: list[str] | None):
    path = Path(path)
    if not path.is_file():
        raise ContractError(f"data file not found: {path}")
    codec = "utf-8-sig" if encoding == "utf-8" else encoding
    if not _check_decodes(path, codec, encoding):
        raise ContractError(f"data file {path} is empty (0 rows, no header)")
    # pandas renames a repeated name ("region", "region.1"); the header as written is kept so
    # that the contract check reports the repeat itself.
    header = _header(path, codec)
    options = dict(dtype=str, keep_default_na=False, na_values=[""], encoding=codec, usecols=columns)
    readers = []

    def pandas_pieces():
        def open_reader():  # inside _parsed: a quote never closed can stop the reader at its start
            readers.append(pd.read_csv(path, chunksize=rows, **options))
            return readers[-1]
        return _parsed(path, open_reader, codec)

    if rows is None:
        pieces = _parsed(path, lambda: iter([pd.read_csv(path, **options)]), codec)
    elif columns is None and codec == "utf-8-sig" and _arrow_can_read(header):
        pieces = _arrow_then_pandas(path, header, rows, pandas_pieces)
    else:
        pieces = pandas_pieces()
    short_rows = _ShortRows(path, codec, len(header)) if columns is None else None
    try:
        seen = False
        for piece in pieces:
            if not seen:
                _check_first_piece(path, piece)
                seen = True
            if short_rows is not None:
                short_rows.add(piece, complete=piece.attrs.pop(_COMPLETE_ROWS, False))
            piece.attrs["header"] = header
            yield piece
        if not seen:
            raise ContractError(f"data file {path} has a header but no data rows")
        if short_rows is not None:
            short_rows.finish()
    finally:
        for reader in readers:
            reader.close()
        if short_rows is not None:
            short_rows.close()


#: Marks a piece read by Arrow: every row of it had the header's number of fields.
_COMPLETE_ROWS = "oddsmith_complete_rows"
#: Bytes Arrow's CSV reader takes at a time (its blocks are parsed on the thread pool).
_ARROW_BLOCK_BYTES = 1 << 22


def _arrow_can_read(header: list[str]) -> bool:
    """Whether Arrow's reader gives the very columns pandas would: every name present and
    written once (pandas renames a repeat or a blank name; those files take pandas' way)."""
    return bool(header) and all(header) and len(set(header)) == len(header)


def _arrow_then_pandas(path: Path, header: list[str], rows: int, pandas_pieces):
    """The pieces of a UTF-8 file read by Arrow's CSV reader, the same cells pandas reads.

    Arrow parses blocks of the file on its thread pool, without a Python string per cell
    (about 5 × faster than pandas' reader at 1,000,000 rows, and it leaves the GIL free).
    The cells are the same as pandas' (text, empty cell = missing, quotes, line ends and a
    byte-order mark read alike: ``tests/test_contract_pieces.py`` compares them), and each
    piece holds exactly ``rows`` rows, indexed as pandas' would be. Arrow refuses any row
    whose field count differs from the header's, and some files pandas reads; then the file
    is read again by pandas from its start, the rows already given are skipped, and pandas
    goes on from there (with its own messages for ragged rows, lines it skips, and so on).
    """
    given, finished = yield from _arrow_pieces(path, header, rows)
    if finished:
        return
    seen = 0
    for piece in pandas_pieces():
        skip = min(max(given - seen, 0), len(piece))
        seen += len(piece)
        if skip < len(piece):
            yield piece.iloc[skip:] if skip else piece


def _arrow_pieces(path: Path, header: list[str], rows: int):
    """Yield Arrow's pieces of ``rows`` rows (the last may be shorter); return the rows given
    and whether the file was read to its end (False when Arrow refused it somewhere, or
    found no data rows, whose message is pandas' way's)."""
    import pyarrow as arrow
    import pyarrow.csv as pacsv

    given = 0
    try:
        reader = pacsv.open_csv(
            path, read_options=pacsv.ReadOptions(block_size=_ARROW_BLOCK_BYTES),
            parse_options=pacsv.ParseOptions(newlines_in_values=True),
            convert_options=pacsv.ConvertOptions(column_types={name: arrow.string() for name in header},
                                                 null_values=[""], strings_can_be_null=True,
                                                 quoted_strings_can_be_null=True))
    except arrow.ArrowException:
        return given, False
    try:
        if reader.schema.names != header:
            return given, False
        held, count, ended = [], 0, False
        while not ended:
            try:
                batch = reader.read_next_batch()
                held.append(batch)
                count += batch.num_rows
            except StopIteration:
                ended = True
            except arrow.ArrowException:
                return given, False
            while count >= rows or (ended and count):
                table = arrow.Table.from_batches(held, schema=reader.schema)
                take = min(rows, count)
                piece = table.slice(0, take).to_pandas()
                piece.index = pd.RangeIndex(given, given + take)
                piece.attrs[_COMPLETE_ROWS] = True
                held, count = table.slice(take).to_batches(), count - take
                given += take
                yield piece
        return given, given > 0
    finally:
        reader.close()


class _ShortRows:
    """Rows with fewer fields than the header, which pandas reads as blank trailing cells.

    A row cut short (a truncated export, a lost line end) would otherwise reach the checks as
    missing values. The CSV is read a second time, record by record, only from the first piece
    whose last column holds a blank (a short row always leaves it blank), and in step with the
    pieces, so a file without such blanks is not read twice. Every short row is reported at
    once, after the last piece.
    """

    def __init__(self, path: Path, codec: str, fields: int):
        self.path, self.codec, self.fields = path, codec, fields
        self.rows_before = 0        # data rows in the pieces already seen
        self.handle = self.records = None
        self.found: list[tuple[int, int]] = []  # (line, fields found)

    def add(self, piece: pd.DataFrame, *, complete: bool = False) -> None:
        """Compare ``piece``'s rows with the file's records; ``complete``: the piece is known
        to hold only full rows (Arrow read it), so it need not be compared."""
        if self.records is None:
            if complete or len(piece.columns) != self.fields or not piece.iloc[:, -1].isna().any():
                self.rows_before += len(piece)
                return
            self._start()
        for _ in range(len(piece)):
            record = next(self.records, None)
            if record is None:  # out of step with pandas (should not happen): stop looking
                self.close()
                self.records = iter(())
                return
            if len(record) < self.fields:
                self.found.append((self.reader.line_num, len(record)))
        self.rows_before += len(piece)

    def _start(self) -> None:
        self.limit = csv.field_size_limit(sys.maxsize)
        self.handle = self.path.open(encoding=self.codec, newline="")
        self.reader = csv.reader(self.handle)
        next(self.reader, None)  # the header
        # pandas skips blank lines and lines of only spaces or tabs; so do the records compared with its rows
        self.records = (record for record in self.reader
                        if record and not (len(record) == 1 and not record[0].strip(" \t")))
        for _ in range(self.rows_before):
            next(self.records, None)

    def finish(self) -> None:
        if not self.found:
            return
        shown = ", ".join(f"line {line} ({found})" for line, found in self.found[:EXAMPLES * 2])
        more = f" and {len(self.found) - EXAMPLES * 2:,} more" if len(self.found) > EXAMPLES * 2 else ""
        raise ContractError(
            f"data file {self.path}: {len(self.found):,} row(s) have fewer fields than the header's "
            f"{self.fields}: {shown}{more} (fields found in brackets); a row cut short would read its last "
            f"cells as blank: repair or remove those rows, or add the missing commas if the cells are empty")

    def close(self) -> None:
        if self.handle is not None:
            self.handle.close()
            csv.field_size_limit(self.limit)
            self.handle = None


def _parsed(path: Path, open_pieces, codec: str):
    """The pieces of a CSV reader, a parser error turned into a message naming the line."""
    try:
        pieces = open_pieces()
        while True:
            try:
                piece = next(pieces)
            except StopIteration:
                return
            yield piece
    except pd.errors.ParserError as exc:
        raise ContractError(_parser_message(path, exc, codec)) from None


def _check_first_piece(path: Path, df: pd.DataFrame) -> None:
    if len(df.columns) == 1 and any(sep in df.columns[0] for sep in (";", "\t", "|")):
        sep = next(s for s in (";", "\t", "|") if s in df.columns[0])
        raise ContractError(
            f"data file {path} has a single column {quoted(df.columns[0])}: it looks delimited by "
            f"{sep!r}, but oddsmith reads comma-separated files; re-save it with commas"
        )
    if df.empty:
        raise ContractError(f"data file {path} has a header but no data rows")


def _header(path: Path, codec: str) -> list[str]:
    """The column names exactly as the file's first record spells them."""
    # the csv module refuses fields over 131,072 characters, which pandas reads; lift the limit
    # for this one record so that a huge header name is reported by the contract check
    limit = csv.field_size_limit(sys.maxsize)
    try:
        with path.open(encoding=codec, newline="") as handle:
            return next(csv.reader(handle), [])
    finally:
        csv.field_size_limit(limit)


def _parser_message(path: Path, exc: Exception, codec: str = "utf-8-sig") -> str:
    """A ragged row: the line, the field counts expected (the header's) and found; or the line
    of a double quote that is never closed."""
    if "EOF inside string" in str(exc):
        return (f"data file {path}, line {_unclosed_quote_line(path, codec)}: a double quote opens a value "
                f"that is never closed, so the rest of the file would read as one cell; close the quote, or "
                f"remove it if it belongs to the value (a quote inside a quoted value is written twice: \"\")")
    found = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
    if not found:
        return f"data file {path} cannot be read as CSV: {quoted(str(exc), limit=200)}"
    expected, line, seen = found.groups()
    return (
        f"data file {path}, line {line}: expected {expected} fields (as many as the header has), "
        f"found {seen}; a value that contains a comma must be enclosed in double quotes"
    )


def _unclosed_quote_line(path: Path, codec: str) -> int:
    """The line on which the file's last record starts: the one whose quote swallows the rest
    (pandas counts rows, not lines, once a value holds a line break)."""
    limit = csv.field_size_limit(sys.maxsize)
    start = 1
    try:
        with path.open(encoding=codec, newline="") as handle:
            reader = csv.reader(handle)
            while True:
                before = reader.line_num
                try:
                    next(reader)
                except StopIteration:
                    return start
                except csv.Error:
                    return before + 1
                start = before + 1
    finally:
        csv.field_size_limit(limit)


def _check_decodes(path: Path, codec: str, encoding: str, chunk_bytes: int = 1 << 24) -> bool:
    """Decode the file piece by piece (never the whole file in memory); False if it holds
    only whitespace. A byte that does not decode is refused with its offset in the file."""
    decoder = codecs.getincrementaldecoder(codec)()
    offset, has_content = 0, False
    with path.open("rb") as handle:
        while True:
            chunk = handle.read(chunk_bytes)
            pending = len(decoder.getstate()[0])
            try:
                text = decoder.decode(chunk, final=not chunk)
            except UnicodeDecodeError as exc:
                raise ContractError(
                    f"data file {path} is not valid {encoding}: byte 0x{exc.object[exc.start]:02x} at offset "
                    f"{offset - pending + exc.start}; re-save it as UTF-8 or set data.encoding (latin-1, cp1252)"
                ) from None
            has_content = has_content or bool(text.strip())
            if not chunk:
                return has_content
            offset += len(chunk)


def validate_frame(
    raw: pd.DataFrame,
    contract: dict,
    *,
    id_column: str,
    target: str | None,
    positive_label: str = "1",
    extra_columns: str = "reject",
    source: str = "data",
) -> pd.DataFrame:
    """Type and check a raw frame against the contract; return the typed frame.

    The target (if given) is returned as int8: 1 where it equals ``positive_label``.
    Pass ``target=None`` to validate new data that has no outcome yet (scoring). The frame is
    checked as a single piece of a :class:`ContractCheck`, so a file checked in pieces gets
    exactly these problems and values.

    Raises
    ------
    ContractError
        Listing every failing column and check with counts and example rows.
    """
    check = ContractCheck(contract, id_column=id_column, target=target, positive_label=positive_label,
                          extra_columns=extra_columns, source=source)
    typed = check.add(raw)
    check.finish(lambda columns: [raw[columns]])
    for name in check.whole_number_columns():
        typed[name] = typed[name].astype("int64")
    return typed


class ContractCheck:
    """Type and check a file against its contract one piece of rows at a time.

    Feed the pieces in file order to :meth:`add` (each returns the piece typed), then call
    :meth:`finish`, which raises one :class:`ContractError` listing every problem of the
    whole file: per column and check the total count of failing rows and the first
    ``EXAMPLES`` examples in file order, as a check of the whole file at once would give.
    Uniqueness is checked across pieces from 64-bit hashes of the typed values (8 bytes a
    row, nothing of the text is kept); rows whose hashes repeat are looked at again through
    ``second_look`` so that a reported repeat is a real one.

    The typed pieces hold the final types except nullable integer columns, which stay
    float64 (a blank anywhere in the file makes the whole column float64);
    :meth:`whole_number_columns` names those without a blank, to be stored as int64.
    """

    def __init__(self, contract: dict, *, id_column: str, target: str | None, positive_label: str = "1",
                 extra_columns: str = "reject", source: str = "data"):
        self.contract, self.id_column, self.target = contract, id_column, target
        self.positive_label, self.extra_columns, self.source = positive_label, extra_columns, source
        self.columns = dict(contract["columns"])
        # Uniqueness needs the whole file: it is checked from hashes, not by each piece.
        self._schema = build_schema({n: s | {"unique": False} for n, s in self.columns.items()})
        self.rows = 0
        self.raw_columns: list[str] | None = None
        self.blanks: dict[str, list] = {}  # column -> [count, first ids of blank rows]
        self._tally: dict[tuple, list] = {}  # order key -> [label, count, examples]
        self._classes: set = set()
        self._hashes = {n: [] for n, s in self.columns.items() if s["unique"]}

    @property
    def problems(self) -> bool:
        """True once any piece has failed a check (the typed pieces are then of no use)."""
        return bool(self._tally)

    def add(self, raw: pd.DataFrame) -> pd.DataFrame:
        """Type and check the next piece; return it typed (index 0..len-1)."""
        if self.raw_columns is None:
            self._check_header(raw)
        offset, self.rows = self.rows, self.rows + len(raw)
        raw = raw[[c for c in raw.columns if c in self.columns]].reset_index(drop=True)
        ids = raw[self.id_column].fillna("(missing id)")
        typed, unparsed = self._coerce(raw, ids)
        self._check_values(typed, ids, unparsed)
        self._note_hashes(typed, offset)
        self._note_blanks(typed)
        if self.target is not None and self.target in typed:
            self._classes.update(typed[self.target].dropna().unique().tolist())
        if not self.problems:  # after a problem the typed pieces are of no use
            self._final_types(typed)
        return typed

    def _final_types(self, typed: pd.DataFrame) -> None:
        if self.target is not None and self.target in typed:
            typed[self.target] = (typed[self.target] == self.positive_label).astype("int8")
        for name, spec in self.columns.items():
            if spec["type"] == "integer" and not spec["nullable"] and name in typed:
                typed[name] = typed[name].astype("int64")

    def finish(self, second_look) -> None:
        """Raise ContractError listing every problem found in the pieces, if any.

        ``second_look(columns)`` yields the raw pieces again (only ``columns``), in the same
        order; it is called only when two rows of a unique column share a hash.
        """
        for name in self._hashes:
            self._check_unique(name, second_look)
        problems = [f"{label}: {count} row(s) fail, e.g. {', '.join(examples)}"
                    for _, (label, count, examples) in sorted(self._tally.items())]
        if self.target is not None and self.target in self.columns and self.target in (self.raw_columns or ()):
            problems += _target_problems(sorted(self._classes), self.target, self.positive_label,
                                         self.columns[self.target])
        if problems:
            raise ContractError(f"{self.source}: {len(problems)} problem(s) against the data contract", problems)

    def whole_number_columns(self) -> list[str]:
        """Nullable integer columns without a blank in the whole file (stored as int64)."""
        return [n for n, s in self.columns.items()
                if s["type"] == "integer" and s["nullable"] and n in self.blanks and self.blanks[n][0] == 0]

    def _check_header(self, raw: pd.DataFrame) -> None:
        problems = _header_problems(raw, self.columns, self.contract, id_column=self.id_column, target=self.target,
                                    extra=self.extra_columns)
        if problems:
            raise ContractError(f"{self.source}: the columns do not match the contract", problems)
        self.raw_columns = list(raw.columns)

    def _note(self, key: tuple, label: str, count: int, examples: list[str]) -> None:
        entry = self._tally.setdefault(key, [label, 0, []])
        entry[1] += count
        entry[2].extend(examples[:EXAMPLES - len(entry[2])])

    def _coerce(self, raw: pd.DataFrame, ids: pd.Series):
        typed, unparsed = pd.DataFrame(index=raw.index), {}
        for position, (name, spec) in enumerate(self.columns.items()):
            if name not in raw:
                continue
            text = raw[name]
            values, bad, label, fraction = _typed(text, spec["type"])
            if fraction is not None and fraction.any():
                self._note((0, position, 0), f"column '{name}', check whole number", int(fraction.sum()),
                           _examples(fraction, ids, text))
            if bad.any():
                self._note((0, position, 1), f"column '{name}', check type: expected {label}", int(bad.sum()),
                           _examples(bad, ids, text))
            unparsed[name] = set(np.flatnonzero(bad.to_numpy()).tolist())
            typed[name] = values
        return typed, unparsed

    def _check_values(self, typed: pd.DataFrame, ids: pd.Series, unparsed: dict) -> None:
        try:
            self._schema.validate(typed, lazy=True)
            return
        except pa.errors.SchemaErrors as exc:
            cases = exc.failure_cases
        cases = cases[cases["column"].notna()]
        for (column, check), group in cases.groupby(["column", "check"], sort=True):
            rows = group["index"].dropna().astype(int).drop_duplicates().to_numpy()
            # A cell that could not be parsed is already reported under its type check.
            rows = np.array([r for r in rows if r not in unparsed.get(column, ())], dtype=int)
            if rows.size:
                shown = [f"{_id(ids.iloc[i])}={_show(typed[column].iloc[i])}" for i in rows[:EXAMPLES]]
                self._note((1, column, check), f"column '{column}', check {_check_name(check)}", len(rows), shown)

    def _note_blanks(self, typed: pd.DataFrame) -> None:
        for name in typed.columns:
            missing = typed[name].isna().to_numpy()
            entry = self.blanks.setdefault(name, [0, []])
            entry[0] += int(missing.sum())
            if len(entry[1]) < BLANK_EXAMPLES and missing.any():
                entry[1].extend(typed[self.id_column][missing].head(BLANK_EXAMPLES - len(entry[1])).tolist())

    def _note_hashes(self, typed: pd.DataFrame, offset: int) -> None:
        for name, pieces in self._hashes.items():
            if name in typed:
                present = typed[name].notna().to_numpy()
                positions = np.flatnonzero(present)
                pieces.append((positions + offset, _value_hashes(typed[name][present])))

    def _check_unique(self, name: str, second_look) -> None:
        pieces = self._hashes[name]
        if not pieces:
            return
        positions = np.concatenate([p for p, _ in pieces])
        hashes = np.concatenate([h for _, h in pieces])
        values, counts = np.unique(hashes, return_counts=True)
        suspects = np.sort(positions[np.isin(hashes, values[counts > 1])])
        if suspects.size == 0:
            return
        ids, values = self._look_again(name, suspects, second_look)
        repeated = values.duplicated(keep=False).to_numpy() & values.notna().to_numpy()
        if repeated.any():
            shown = [f"{_id(ids.iloc[i])}={_show(values.iloc[i])}" for i in np.flatnonzero(repeated)[:EXAMPLES]]
            self._note((1, name, "field_uniqueness"), f"column '{name}', check unique", int(repeated.sum()), shown)

    def _look_again(self, name: str, suspects: np.ndarray, second_look):
        """The ids (as written) and typed values of column ``name`` at the rows ``suspects``."""
        wanted = list(dict.fromkeys([self.id_column, name]))
        ids, values, offset = [], [], 0
        for raw in second_look(wanted):
            local = suspects[(suspects >= offset) & (suspects < offset + len(raw))] - offset
            offset += len(raw)
            if local.size:
                rows = raw.iloc[local].reset_index(drop=True)
                ids.append(rows[self.id_column].fillna("(missing id)"))
                values.append(_typed(rows[name], self.columns[name]["type"])[0])
        return pd.concat(ids, ignore_index=True), pd.concat(values, ignore_index=True)


#: Example ids given for blank cells of a column (see ContractCheck.blanks).
BLANK_EXAMPLES = 5


def _value_hashes(values: pd.Series) -> np.ndarray:
    """64-bit hashes of typed values, equal for equal values (numbers as float64, so that
    5 and 5.0 and -0.0 and 0.0 hash alike, as they compare)."""
    if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values.dtype):
        values = pd.Series(values.to_numpy(dtype="float64") + 0.0)
    return pd.util.hash_pandas_object(values, index=False).to_numpy()


def _header_problems(raw, columns, contract, *, id_column, target, extra) -> list[str]:
    problems = []
    for key, name in (("id_column", id_column), ("target", target)):
        if name is not None and name not in contract["columns"]:
            problems.append(f"config data.{key} '{name}' is not declared in the data contract")
    present = list(raw.attrs.get("header") or raw.columns)
    for name in sorted({c for c in present if present.count(c) > 1}):
        places = ", ".join(str(i + 1) for i, c in enumerate(present) if c == name)
        problems.append(
            f"column {quoted(name)} appears {present.count(name)} times in the header (positions {places}); "
            "each column name must appear once"
        )
    missing = [n for n, s in columns.items() if s["required"] and n not in present]
    if target is None:
        missing = [n for n in missing if n != contract.get("_target")]
    for name in missing:
        problems.append(f"column '{name}': required by the contract, not found in the file")
    unexpected = list(dict.fromkeys(c for c in present if c not in contract["columns"]))
    if unexpected and extra == "reject":
        problems.append(
            f"column(s) {', '.join(quoted(c) for c in unexpected[:10])}"
            f"{f' and {len(unexpected) - 10} more' if len(unexpected) > 10 else ''} are not declared in the contract (data.extra_columns is 'reject'; "
            "declare them or set it to 'ignore')"
        )
    return problems


def _examples(mask: pd.Series, ids: pd.Series, values: pd.Series) -> list[str]:
    rows = np.flatnonzero(mask.to_numpy())[:EXAMPLES]
    return [f"{_id(ids.iloc[i])}={quoted(values.iloc[i])}" for i in rows]


def _id(value) -> str:
    """A row id in a message (an id is printed bare unless it is long enough to be cut)."""
    text = str(value)
    return text if len(text) <= 60 else quoted(text)


def _typed(text: pd.Series, kind: str):
    """Typed values of a text column, the cells that do not parse, the expected form, and
    (integer columns) the cells that are numbers but not whole."""
    fraction = None
    if kind in ("integer", "float"):
        values = _to_float(text)
        bad, label = values.isna() & text.notna(), "a number"
        if kind == "integer":
            fraction = values.notna() & np.isfinite(values) & (values != np.round(values))
    elif kind == "date":
        # Microseconds always: pandas picks seconds for a piece whose cells are all blank.
        values = pd.to_datetime(text, format="%Y-%m-%d", errors="coerce").astype("datetime64[us]")
        bad, label = values.isna() & text.notna(), "a date YYYY-MM-DD"
    else:
        values, bad, label = text.astype("string"), pd.Series(False, index=text.index), ""
    return values, bad, label, fraction


def _to_float(text: pd.Series) -> pd.Series:
    """``pd.to_numeric(text, errors="coerce")`` as float64, through Arrow's cast when every cell
    parses (about 7 times faster at 1M rows; the same doubles, checked by a test); any cell
    Arrow refuses (spaces, words, ...) sends the column through pandas, which marks it missing
    so the caller can report it."""
    import pyarrow as pa
    import pyarrow.compute as pc

    try:
        cells = pa.array(text, from_pandas=True)
        if pa.types.is_string(cells.type) or pa.types.is_large_string(cells.type):
            parsed = pc.cast(cells, pa.float64()).to_numpy(zero_copy_only=False)
            return pd.Series(parsed, index=text.index, dtype="float64")
    except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError):
        pass
    return pd.to_numeric(text, errors="coerce").astype("float64")


def build_schema(columns: dict) -> pa.DataFrameSchema:
    """Turn contract column declarations into a pandera schema (value checks only)."""
    schema_columns = {}
    for name, spec in columns.items():
        checks = []
        if spec["type"] in ("integer", "float"):
            checks.append(pa.Check(lambda s: np.isfinite(s), element_wise=False, name="finite (not inf)"))
        if spec.get("min") is not None:
            low = pd.Timestamp(spec["min"]) if spec["type"] == "date" else spec["min"]
            checks.append(pa.Check.greater_than_or_equal_to(low))
        if spec.get("max") is not None:
            high = pd.Timestamp(spec["max"]) if spec["type"] == "date" else spec["max"]
            checks.append(pa.Check.less_than_or_equal_to(high))
        if spec["type"] == "category":
            checks.append(pa.Check.isin([str(v) for v in spec["levels"]]))
        schema_columns[name] = pa.Column(
            nullable=spec["nullable"], unique=spec["unique"], checks=checks, required=False
        )
    return pa.DataFrameSchema(schema_columns, strict=False)


def _show(value) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA or value is pd.NaT:
        return "(missing)"
    if isinstance(value, pd.Timestamp):
        return value.date().isoformat()
    return quoted(value.item() if hasattr(value, "item") else value)


def _check_name(check: str) -> str:
    return {"not_nullable": "not empty", "field_uniqueness": "unique"}.get(check, check)


def _target_problems(present: list, name: str, positive: str, spec: dict) -> list[str]:
    """The target must be a two-level category holding ``positive``; ``present`` are the
    distinct values found (sorted)."""
    problems = []
    levels = [str(v) for v in spec.get("levels", [])]
    if spec["type"] != "category" or len(levels) != 2:
        problems.append(
            f"target '{name}': the contract must declare it as a category with exactly two levels, found {quoted(spec)}"
        )
    if positive not in levels:
        problems.append(f"target '{name}': positive_label {quoted(positive)} is not one of its levels {quoted(levels)}")
    if len(present) == 1:
        problems.append(f"target '{name}': only one class present ({quoted(present[0])}); a yes/no model needs both")
    return problems
