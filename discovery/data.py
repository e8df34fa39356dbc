"""Reading a table of measurements: column kinds, missing values, exclusions and checks.

A search needs a table with one column per variable and one row per unit (person, machine,
day). This module turns a file or an in-memory :class:`pandas.DataFrame` into a
:class:`Dataset`: the usable columns, the kind of every column, the share of missing cells,
the columns left out and why, and a SHA-256 fingerprint of the input so that a result can
name the exact data it came from.

Column kinds
------------
Every column gets one of four kinds (:data:`KINDS`), which tells the user (and the choice of
independence test) what the values look like:

``continuous``
    Numbers on a scale: floating-point values, or integers with more than 10 distinct levels.
``binary``
    Exactly two distinct values, whatever they are (0/1, yes/no, True/False).
``categorical``
    Text, booleans or a pandas category with more than two levels.
``ordinal``
    Integer-valued numbers with 3 to 10 distinct levels (a rating, a count of a few), or an
    *ordered* pandas category with more than two levels.

The cut-off of 10 levels is common practice, no source: it is a rule of thumb, and a user who
knows better can choose the test accordingly. A column with no value or a single value takes
its kind from its type (numbers: continuous; booleans: binary; other: categorical) and is left
out of the search anyway.

Missing values
--------------
In CSV and TSV files a cell is missing when it is empty or holds one of the markers
:data:`MISSING_MARKERS` (``NA``, ``NaN``, ``nan``, ``null``, ``?``); spaces before a value are
ignored. In Parquet files and in-memory frames, missing means a null, ``NaN``, ``None`` or
``pandas.NA``; strings are taken as they are. Two policies decide which rows a search sees:

``"drop"``
    Only rows complete on every used column (list-wise deletion). Simple and exact when values
    are missing completely at random; otherwise it can bias the answer.
``"test-wise"``
    Keep every row; each independence test uses the rows complete on its own variables
    (Tu, Zhang, Kjellström & Zhang 2019). Uses more of the data, at the price of tests that
    see different rows.

What is left out, and what is an error
--------------------------------------
Columns that are entirely missing, or constant (one distinct value), carry no information
about dependence: they are left out with a :class:`~discovery.exceptions.DegenerateDataWarning`
and a note. Everything that makes the table unusable raises
:class:`~discovery.exceptions.DataValidationError` with one line that names the file and the
column and says what to do. Checks that depend on the chosen independence test (numbers for
Fisher's z, enough rows for the depth, no perfectly collinear columns) are in
:func:`check_for_search`, run just before a search.

Examples
--------
>>> import pandas as pd
>>> frame = pd.DataFrame({"dose": [0.5, 1.0, 1.5, 2.0, 2.5, 3.0],
...                       "smoker": ["yes", "no", "no", "yes", "no", "yes"],
...                       "grade": [1, 2, 3, 2, 1, 3],
...                       "site": ["A"] * 6})
>>> import warnings
>>> with warnings.catch_warnings():
...     warnings.simplefilter("ignore")
...     data = prepare_frame(frame)
>>> data.variables
('dose', 'smoker', 'grade')
>>> dict(data.kinds)
{'dose': 'continuous', 'smoker': 'binary', 'grade': 'ordinal', 'site': 'categorical'}
>>> dict(data.excluded)
{'site': 'constant'}

References
----------
.. [1] Tu, R., Zhang, K., Kjellström, H. & Zhang, C. (2019). Causal discovery in the presence
   of missing data. *Proceedings of AISTATS*, PMLR 89, 1762–1770.
"""

from __future__ import annotations

import codecs
import csv
import difflib
import hashlib
import io
import re
import warnings
from collections import Counter
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from functools import cached_property
from itertools import islice
from pathlib import Path

import numpy as np
import pandas as pd

from .exceptions import DataValidationError, DegenerateDataWarning

__all__ = [
    "KINDS",
    "MISSING_MARKERS",
    "MISSING_POLICIES",
    "SEPARATORS",
    "Dataset",
    "read_table",
    "prepare_frame",
    "column_kind",
    "check_for_search",
]

#: The kinds a column can have (see the module docstring).
KINDS = ("continuous", "binary", "categorical", "ordinal")

#: Cell contents read as "missing" in CSV and TSV files, besides an empty cell.
MISSING_MARKERS = ("", "NA", "N/A", "n/a", "#N/A", "NaN", "nan", "null", "NULL", "?", "-", ".")

#: Separators tried when a text file's separator is not given: comma, semicolon, tab, bar.
SEPARATORS = (",", ";", "\t", "|")

#: The missing-value policies: complete rows only, or each test on its own complete rows.
MISSING_POLICIES = ("drop", "test-wise")

# Integer-valued columns with this many distinct levels or fewer (and at least 3) are
# ordinal; more levels make them continuous. Common practice, no source.
_ORDINAL_MAX_LEVELS = 10

# Fisher's z needs n - |S| - 3 > 0 for its statistic: with depth d, at least d + 4 rows.
# A search on fewer than 5 rows says nothing, whatever the test. Common practice, no source.
_FISHER_Z_EXTRA_ROWS = 4
_MIN_ROWS = 5

# Singular values of the standardized data matrix below this share of the largest one mark
# an exact linear dependence (rounding in double precision stays near 1e-15).
_SCREEN_RTOL = 1e-9  # smallest Cholesky pivot below which the exact SVD check runs
_COLLINEAR_RTOL = 1e-10

_TEXT_SUFFIXES = {".csv": ",", ".tsv": "\t", ".tab": "\t"}
_PARQUET_SUFFIXES = {".parquet", ".pq"}
_UNSUPPORTED_SUFFIXES = {".xlsx", ".xls", ".xlsm", ".ods", ".json", ".sav", ".dta", ".sas7bdat",
                         ".feather", ".h5", ".hdf5", ".pkl", ".pickle", ".zip", ".gz"}

_IN_MEMORY = "data"


class _FrozenMap(Mapping):
    """A read-only mapping that keeps insertion order and survives pickling."""

    __slots__ = ("_items",)

    def __init__(self, items: Iterable[tuple[str, object]] | Mapping = ()):
        object.__setattr__(self, "_items", dict(items))

    def __getitem__(self, key):
        return self._items[key]

    def __iter__(self) -> Iterator:
        return iter(self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __setattr__(self, name, value):
        raise AttributeError("this mapping is read-only")

    def __reduce__(self):
        return (_FrozenMap, (list(self._items.items()),))

    def __repr__(self) -> str:
        return repr(self._items)


@dataclass(frozen=True, eq=False)
class Dataset:
    """A table ready for a search, with what was learned while reading it.

    Attributes
    ----------
    frame : pandas.DataFrame
        The usable columns only (after the user's selection and the exclusions), in file
        order, with a fresh ``RangeIndex``. Rows follow the missing policy: ``"drop"`` keeps
        only complete rows; ``"test-wise"`` keeps missing cells as ``NaN`` (rows missing in
        every used column are removed).
    kinds : Mapping[str, str]
        Kind of every column read, used or not (one of :data:`KINDS`).
    missing_share : Mapping[str, float]
        Share of missing cells (0 to 1) of every column read, over all rows read.
    excluded : Mapping[str, str]
        Columns left out, each with its reason: ``"not selected"``, ``"excluded on request"``,
        ``"all missing"``, ``"constant"``, ``"constant in the complete rows"``,
        ``"identifier"``, ``"date/time"`` or ``"free text"``.
    source : str or None
        The path as given to :func:`read_table`; ``None`` for an in-memory frame.
    sha256 : str
        SHA-256 (hex) of the file's bytes, or of the in-memory frame's CSV rendering
        (column names and values; see :func:`prepare_frame`).
    rows_read, rows_used : int
        Data rows in the input, and rows in :attr:`frame`.
    missing : str
        The missing policy, ``"drop"`` or ``"test-wise"``.
    notes : tuple of str
        Plain-language notes on what was done, e.g. ``"12 rows with missing values dropped"``.

    Notes
    -----
    The record is frozen; do not modify :attr:`frame` in place either. Two datasets compare
    equal only when they are the same object; compare :attr:`sha256` to ask whether they
    came from the same input.
    """

    frame: pd.DataFrame
    kinds: Mapping[str, str]
    missing_share: Mapping[str, float]
    excluded: Mapping[str, str]
    source: str | None
    sha256: str
    rows_read: int
    rows_used: int
    missing: str
    notes: tuple[str, ...] = ()

    @cached_property
    def variables(self) -> tuple[str, ...]:
        """The names of the usable columns, in file order."""
        return tuple(self.frame.columns.tolist())

    @property
    def label(self) -> str:
        """The name used in messages: the path as given, or ``"data"`` for a frame."""
        return self.source if self.source is not None else _IN_MEMORY

    def summary(self) -> str:
        """A readable table of every column read: kind, missing share and status.

        Returns
        -------
        str
            A header line (source, rows, policy, fingerprint), one line per column, and the
            numbered notes.
        """
        head = (f"{self.label}: {self.rows_read} rows read, {self.rows_used} used "
                f"(missing: {self.missing}); {len(self.variables)} of {len(self.kinds)} "
                f"columns used; SHA-256 {self.sha256[:12]}")
        rows = [("column", "kind", "missing", "status")]
        for name, kind in self.kinds.items():
            status = "used" if name not in self.excluded else f"excluded: {self.excluded[name]}"
            rows.append((name, kind, f"{100 * self.missing_share[name]:.1f}%", status))
        widths = [max(len(r[i]) for r in rows) for i in range(3)]
        lines = [head]
        for name, kind, share, status in rows:
            lines.append(f"  {name:<{widths[0]}}  {kind:<{widths[1]}}  "
                         f"{share:>{widths[2]}}  {status}".rstrip())
        if self.notes:
            lines.append("Notes:")
            lines.extend(f"  [{i}] {note}" for i, note in enumerate(self.notes, start=1))
        return "\n".join(lines)

    def __repr__(self) -> str:
        excluded = f", excluded={dict(self.excluded)!r}" if self.excluded else ""
        return (f"Dataset(source={self.source!r}, rows_used={self.rows_used}, "
                f"variables={self.variables!r}{excluded})")


# --------------------------------------------------------------------------- column kinds

def _is_numeric(series: pd.Series) -> bool:
    """True for number columns (not booleans), including object columns of numbers only."""
    dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype):
        return False
    if pd.api.types.is_numeric_dtype(dtype):
        return True
    if dtype == object:
        return pd.api.types.infer_dtype(series, skipna=True) in (
            "integer", "floating", "mixed-integer-float", "decimal")
    return False


def column_kind(series: pd.Series) -> str:
    """The kind of a column: ``"continuous"``, ``"binary"``, ``"categorical"`` or ``"ordinal"``.

    Parameters
    ----------
    series : pandas.Series
        One column; missing values are ignored.

    Returns
    -------
    str
        ``"binary"`` when there are exactly two distinct values; otherwise, for numbers,
        ``"ordinal"`` when all values are whole numbers with 3 to 10 distinct levels and
        ``"continuous"`` else; an ordered pandas category is ``"ordinal"``; other columns
        (text, booleans, categories) are ``"categorical"``. The 10-level cut-off is common
        practice, no source.

    Notes
    -----
    A column with fewer than two distinct values takes its kind from its type: numbers are
    continuous, booleans binary, anything else categorical.

    Examples
    --------
    >>> import pandas as pd
    >>> column_kind(pd.Series([0.1, 2.5, 3.7]))
    'continuous'
    >>> column_kind(pd.Series(["yes", "no", None, "yes"]))
    'binary'
    >>> column_kind(pd.Series([1, 2, 3, 4, 5]))
    'ordinal'
    """
    values = series.dropna()
    levels = values.nunique()
    if levels == 2:
        return "binary"
    if _is_numeric(series):
        if levels < 2:
            return "continuous"
        numbers = pd.to_numeric(values).to_numpy(dtype=float)
        whole = bool(np.all(np.isfinite(numbers) & (numbers == np.round(numbers))))
        return "ordinal" if whole and levels <= _ORDINAL_MAX_LEVELS else "continuous"
    if pd.api.types.is_bool_dtype(series.dtype):
        return "binary"
    if isinstance(series.dtype, pd.CategoricalDtype) and series.dtype.ordered and levels > 2:
        return "ordinal"
    return "categorical"


# --------------------------------------------------------------------------- messages

def _quote_list(names: Iterable[str]) -> str:
    """``'a'``, ``'a' and 'b'``, ``'a', 'b' and 'c'``."""
    quoted = [repr(str(n)) for n in names]
    if len(quoted) <= 1:
        return "".join(quoted)
    return ", ".join(quoted[:-1]) + " and " + quoted[-1]


def _columns_word(names) -> str:
    return "column" if len(names) == 1 else "columns"


def _plain(value) -> str:
    """A cell value as a user would write it: ``3``, ``2.5``, ``'yes'``."""
    if hasattr(value, "item"):
        value = value.item()
    return repr(value) if isinstance(value, str) else str(value)


def _fail(label: str, message: str) -> DataValidationError:
    return DataValidationError(f"{label}: {message}")


# --------------------------------------------------------------------------- reading files

def read_table(path, *, columns=None, exclude=None, missing: str = "drop", sep=None,
               decimal: str = ".", thousands: str | None = None, na_values=None,
               include=None) -> Dataset:
    """Read a CSV, TSV or Parquet file into a :class:`Dataset`.

    The file is read once, as bytes: the fingerprint and the table come from the same bytes,
    and the file is never written to.

    Parameters
    ----------
    path : str or os.PathLike
        ``.parquet`` / ``.pq`` (needs pyarrow), or delimited text under any other name
        (``.csv``, ``.tsv``, ``.txt``...). The separator of text is detected from the first
        lines whatever the extension: comma, semicolon, tab or bar (:data:`SEPARATORS`); the
        one that splits every line into the same number of cells wins, the extension breaks
        ties. Line ends may be LF, CRLF or CR alone. Text must be UTF-8 (a byte-order mark is
        fine) or UTF-16 with a byte-order mark.
    columns : str or sequence of str, optional
        The columns to use (default: all usable). A column named here is kept even when it
        looks like an identifier, a date or free text (see :func:`prepare_frame`).
    exclude : str or sequence of str, optional
        Columns to leave out.
    missing : {"drop", "test-wise"}
        The missing-value policy (see the module docstring).
    include : str or sequence of str, optional
        Columns to keep even though they look like an identifier, a date or free text (the
        other columns stay as they are).
    sep : str, optional
        The separator, when detection is not wanted (``"\\t"`` may be written for tab).
    decimal : str
        The decimal mark, ``"."`` (default) or ``","`` (``"1,5"`` is one and a half).
    thousands : str, optional
        The thousands separator, e.g. ``","`` (``"1,250"``), ``"."`` or ``" "``.
    na_values : str or sequence of str, optional
        More cell contents to read as missing, besides :data:`MISSING_MARKERS`.

    Returns
    -------
    Dataset

    Raises
    ------
    DataValidationError
        The file does not exist or cannot be read; it is empty or has a header but no rows;
        its header names a column twice (which pandas would silently rename); a row has more
        or fewer cells than the header; the text is not UTF-8; a column holds numbers written
        with a decimal comma or a thousands separator that ``decimal`` / ``thousands`` do not
        describe (the message names the option); a name in ``columns`` or
        ``exclude`` is not in the file; ``missing`` is not a known policy; or every row has a
        missing value under ``missing="drop"``. Parquet without pyarrow installed.

    Warns
    -----
    DegenerateDataWarning
        When columns are left out because they are constant or entirely missing.
    """
    label = str(path)
    _check_policy(missing, label)
    file = Path(path)
    raw = read_input_bytes(file, label)
    digest = hashlib.sha256(raw).hexdigest()
    suffix = file.suffix.lower()
    if suffix in _PARQUET_SUFFIXES:
        frame = _parse_parquet(raw, label)
    elif suffix in _UNSUPPORTED_SUFFIXES:
        raise _fail(label, f"cannot read '{suffix}' files; save the table as CSV (.csv), "
                           f"TSV (.tsv) or Parquet (.parquet) and open that")
    else:
        frame = _parse_text(raw, label, _TEXT_SUFFIXES.get(suffix), sep=sep, decimal=decimal,
                            thousands=thousands, na_values=na_values)
    dataset, warns = _prepare(frame, columns=columns, exclude=exclude, missing=missing,
                              source=label, label=label, sha256=digest,
                              number_format=(decimal, thousands), include=include)
    for message in warns:
        warnings.warn(message, DegenerateDataWarning, stacklevel=2)
    return dataset


def _check_policy(missing, label: str) -> None:
    if missing not in MISSING_POLICIES:
        raise _fail(label, f"the missing policy must be 'drop' or 'test-wise', got "
                           f"{missing!r}; pick one of those")


def read_input_bytes(file: Path, label: str, *, what: str = "a CSV, TSV or Parquet file",
                     allow_empty: bool = False) -> bytes:
    """The bytes of an input file, or one clear DataValidationError saying why not.

    Shared by every reader of user files (tables here, known diagrams in :mod:`discovery.io`);
    the file is only read, never changed. Devices, pipes and link loops are refused before
    reading, and so is a file larger than the memory available to hold it.
    """
    import errno
    import os
    import stat

    from .resources import available_memory
    try:
        info = os.stat(file)
        if stat.S_ISREG(info.st_mode) and info.st_size * 3 > available_memory():
            raise _fail(label, f"{info.st_size / 2**30:,.1f} GiB is more than this machine's "
                               "memory can read and check; keep the columns and rows you "
                               "need in a smaller file")
        if not stat.S_ISREG(info.st_mode) and not stat.S_ISDIR(info.st_mode):
            raise _fail(label, f"is not a regular file (a device or pipe); give the path of "
                               f"{what}")
        raw = Path(file).read_bytes()
    except FileNotFoundError:
        raise _fail(label, "file not found; check the path and the working folder") from None
    except IsADirectoryError:
        raise _fail(label, f"is a folder, not a file; give the path of {what}") from None
    except PermissionError:
        raise _fail(label, "permission denied; check that you may read the file") from None
    except OSError as err:
        if err.errno == errno.ELOOP:
            raise _fail(label, "a loop of symbolic links; give the path of the real "
                               "file") from None
        raise _fail(label, f"cannot be read ({err.strerror or err}); check the path "
                           f"and the disk") from None
    if not raw and not allow_empty:
        raise _fail(label, "the file is empty (0 bytes); export the table again with a "
                           "header line and at least one row")
    return raw


def _parse_parquet(raw: bytes, label: str) -> pd.DataFrame:
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        raise _fail(label, "reading Parquet files needs pyarrow; run `pip install pyarrow`, "
                           "or save the table as CSV") from None
    try:
        frame = pd.read_parquet(io.BytesIO(raw))
    except Exception as err:  # pyarrow raises several unrelated types for a damaged file
        reason = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise _fail(label, f"not a readable Parquet file ({reason}); export it again or "
                           f"save it as CSV") from None
    if frame.shape[1] == 0:
        raise _fail(label, "the Parquet file has no columns; export the table again")
    for name in frame.columns[frame.dtypes == object]:
        nested = frame[name].map(lambda v: isinstance(v, (list, tuple, dict, np.ndarray)))
        if nested.any():
            raise _fail(label, f"column {name!r} holds lists or records (nested values), not "
                               "one value per row; flatten it into columns or leave it out "
                               "when exporting")
    return frame


def _decode(raw: bytes, label: str) -> str:
    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError:
            raise _fail(label, "starts like UTF-16 text but cannot be decoded; re-save it "
                               "as UTF-8 CSV") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = raw[:err.start].count(b"\n") + 1
        raise _fail(label, f"line {line}: byte 0x{raw[err.start]:02x} is not UTF-8 text; "
                           f"re-save the file as UTF-8 (e.g. 'CSV UTF-8' in a spreadsheet)"
                    ) from None
    if "\x00" in text:
        line = text[:text.index("\x00")].count("\n") + 1
        raise _fail(label, f"line {line}: holds a NUL byte, so it is not a text table; save "
                           f"the table as CSV, TSV or Parquet")
    return text


def _lines(text: str, *, keepends: bool = False) -> Iterator[str]:
    """The lines of ``text`` one at a time: as ``text.split("\\n")`` gives them, or with
    ``keepends`` as iterating over ``io.StringIO(text)`` does; a large table is then never
    held again as a list of lines or as a buffer of 4 bytes a character."""
    start = 0
    while True:
        end = text.find("\n", start)
        if end < 0:
            if start < len(text) or not keepends:  # (a file object yields no empty last line)
                yield text[start:]
            return
        yield text[start:end + 1 if keepends else end]
        start = end + 1


def _sniff_separator(lines: Iterable[str], preferred: str | None) -> str:
    """The separator that splits the first lines into the same number (> 1) of cells.

    Quoted cells are honoured (``csv.reader``). Among separators that split consistently,
    the most cells wins; the extension's separator (``preferred``) breaks ties. With none
    consistent, the one most frequent in the header line is taken.
    """
    sample = list(islice((line for line in lines if line.strip()), 20))
    scores = {}
    for candidate in SEPARATORS:
        try:
            widths = {len(r) for r in csv.reader(sample, delimiter=candidate)}
        except csv.Error:
            continue
        if len(widths) == 1 and min(widths) > 1:
            scores[candidate] = (min(widths), candidate == preferred)
    if scores:
        return max(scores, key=scores.get)
    counts = {c: sample[0].count(c) for c in SEPARATORS} if sample else {}
    best = max(counts, key=counts.get) if counts else ","
    return best if counts.get(best) else (preferred or ",")


def _check_option_char(value, option: str, label: str) -> None:
    if value is not None and (not isinstance(value, str) or len(value) != 1):
        raise _fail(label, f"{option} must be a single character, got {value!r}; e.g. "
                           f"{option} ','")


def _parse_text(raw: bytes, label: str, preferred: str | None, *, sep=None,
                decimal: str = ".", thousands: str | None = None,
                na_values=None) -> pd.DataFrame:
    text = _decode(raw, label)
    if "\r" in text:  # CRLF and old Mac CR-only line ends become LF
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    if sep in ("\\t", "tab", "TAB"):
        sep = "\t"
    _check_option_char(sep, "sep", label)
    _check_option_char(decimal, "decimal", label)
    _check_option_char(thousands, "thousands", label)
    if decimal == thousands:
        raise _fail(label, f"the decimal mark and the thousands separator are both "
                           f"{decimal!r}; give them different characters")
    if isinstance(na_values, str):
        na_values = [na_values]
    markers = list(MISSING_MARKERS) + [str(v) for v in (na_values or ())]
    if not text or text.isspace():
        raise _fail(label, "the file holds only blank lines; export the table again with a "
                           "header line and at least one row")
    if sep is None:
        sep = _sniff_separator(_lines(text), preferred)
        if sep == decimal:
            raise _fail(label, f"the detected separator {sep!r} is also the decimal mark; "
                               f"give the separator (--sep / sep=)")

    header = _check_shape(text, label, sep)
    seen: dict[str, int] = {}
    for position, name in enumerate(header, start=1):
        if name in seen:
            raise _fail(label, f"the header names column {name!r} twice (columns "
                               f"{seen[name]} and {position}); rename one of them")
        seen[name] = position

    # pandas reads the UTF-8 bytes (a StringIO would hold the text at 4 bytes a character);
    # they are the file's own bytes when decoding and line ends changed nothing
    data = raw if len(raw) == len(text) and text.isascii() else text.encode("utf-8")
    del text
    try:
        frame = pd.read_csv(io.BytesIO(data), sep=sep, na_values=markers, encoding="utf-8",
                            keep_default_na=False, index_col=False, skipinitialspace=True,
                            decimal=decimal, thousands=thousands)
    except pd.errors.EmptyDataError:
        raise _fail(label, "no columns found; export the table again with a header "
                           "line") from None
    except (pd.errors.ParserError, ValueError) as err:
        found = re.search(r"line (\d+)", str(err))
        where = f"line {found.group(1)}: " if found else ""
        reason = str(err).splitlines()[0].replace("Error tokenizing data. ", "")
        raise _fail(label, f"{where}cannot be read as a table ({reason}); fix that line "
                           f"or export the table again") from None
    if len(frame) == 0:
        raise _fail(label, "has a header line but no data rows; add rows or pick the "
                           "right file")
    return frame


def _check_shape(text: str, label: str, sep: str) -> list[str]:
    """Return the header's names; raise if any row has more or fewer cells than the header.

    pandas silently pads short rows with missing values, so the count is checked here.
    """
    reader = csv.reader(_lines(text, keepends=True), delimiter=sep, skipinitialspace=True)
    header: list[str] | None = None
    try:
        for record in reader:
            if not record or (len(record) == 1 and not record[0].strip()):
                continue  # blank line, skipped by pandas as well
            if header is None:
                header = record
                continue
            if len(record) != len(header):
                raise _fail(label, f"line {reader.line_num}: {len(record)} "
                                   f"cell{'s' if len(record) != 1 else ''} where the "
                                   f"header has {len(header)}; fix the row (a stray "
                                   f"separator or a missing cell?)")
    except csv.Error as err:
        raise _fail(label, f"line {reader.line_num}: cannot be read as a table ({err}); fix "
                           f"that line or export the table again") from None
    return header or []


# --------------------------------------------------------------------------- preparing

def _copies_on_write() -> bool:
    """True when pandas copies a frame's data only when it is changed (copy-on-write: always
    from pandas 3, by option in pandas 2)."""
    return int(pd.__version__.split(".")[0]) >= 3 or pd.options.mode.copy_on_write is True


def _frame_fingerprint(frame: pd.DataFrame) -> str:
    """SHA-256 of the column names and values: numeric columns as float64 bytes, any other
    column as its CSV text (a canonical rendering that is cheap for large numeric tables)."""
    digest = hashlib.sha256()
    if len(frame.columns) and all(t == np.float64 for t in frame.dtypes):
        values = frame.to_numpy()  # all float64: one array, the same bytes column by column
        for j, name in enumerate(frame.columns.tolist()):
            digest.update(str(name).encode("utf-8") + b"\x00")
            digest.update(np.ascontiguousarray(values[:, j]).tobytes())
        return digest.hexdigest()
    for i, name in enumerate(frame.columns):
        column = frame.iloc[:, i]
        digest.update(str(name).encode("utf-8") + b"\x00")
        if pd.api.types.is_numeric_dtype(column.dtype) and not \
                pd.api.types.is_bool_dtype(column.dtype):
            digest.update(np.ascontiguousarray(column.to_numpy(dtype=float)).tobytes())
        else:
            digest.update(column.to_csv(index=False, lineterminator="\n").encode("utf-8"))
    return digest.hexdigest()


def prepare_frame(frame, *, columns=None, exclude=None, missing: str = "drop",
                  source: str | None = None, include=None) -> Dataset:
    """Apply the reading rules to an in-memory table.

    Parameters
    ----------
    frame : pandas.DataFrame
        The table; it is not modified. Column names are turned into strings.
    columns, exclude, missing, include
        As in :func:`read_table`. Columns that look like an identifier (text, or a run of
        consecutive whole numbers, with a different value in almost every row), dates/times or
        free text are left out with a note, unless named in ``include`` or ``columns``. Yes/no, y/n,
        true/false and boolean columns are read as binary 1/0 with a note.
    source : str, optional
        Where the frame came from, used in messages and kept in :attr:`Dataset.source`
        (default: none; messages then say ``"data"``).

    Returns
    -------
    Dataset
        Its :attr:`~Dataset.sha256` is the fingerprint of the column names and values
        (numeric columns as float64 bytes, others as CSV text).

    Raises
    ------
    DataValidationError
        ``frame`` is not a DataFrame, has no rows or no columns, or has two columns with the
        same name; a name in ``columns`` or ``exclude`` is not in the frame; ``missing`` is
        not a known policy; a text column holds numbers written with a decimal comma or a
        thousands separator; or every row has a missing value under ``missing="drop"``.

    Warns
    -----
    DegenerateDataWarning
        When columns are left out because they are constant or entirely missing.
    """
    label = source if source is not None else _IN_MEMORY
    _check_policy(missing, label)
    if not isinstance(frame, pd.DataFrame):
        raise _fail(label, f"expected a pandas DataFrame, got {type(frame).__name__}; "
                           f"wrap it with pandas.DataFrame(...) and name the columns")
    if frame.shape[1] == 0:
        raise _fail(label, "the table has no columns")
    if len(frame) == 0:
        raise _fail(label, "the table has no rows")
    digest = _frame_fingerprint(frame)
    dataset, warns = _prepare(frame, columns=columns, exclude=exclude, missing=missing,
                              source=source, label=label, sha256=digest, include=include)
    for message in warns:
        warnings.warn(message, DegenerateDataWarning, stacklevel=2)
    return dataset


def _as_names(value, argument: str) -> list[str] | None:
    if value is None:
        return None
    if isinstance(value, str):
        return [value]
    try:
        return [str(v) for v in value]
    except TypeError:
        raise DataValidationError(f"The '{argument}' parameter must be a list of column "
                                  f"names; got {value!r} instead.") from None


def _check_known(names: list[str] | None, argument: str, available: list[str],
                 label: str) -> None:
    if not names:
        return
    unknown = [n for n in dict.fromkeys(names) if n not in available]
    if not unknown:
        return
    name = unknown[0]
    close = difflib.get_close_matches(name, available, n=1)
    hint = f"did you mean {close[0]!r}? " if close else ""
    shown = ", ".join(repr(a) for a in available[:8]) + (", ..." if len(available) > 8 else "")
    more = f" (and {_quote_list(unknown[1:])})" if len(unknown) > 1 else ""
    raise _fail(label, f"unknown column {name!r}{more} in '{argument}'; {hint}the columns "
                       f"are {shown}")


def _looks_like_identifier(series: pd.Series) -> bool:
    """True for a column of 20 or more distinct codes: text, or a run of consecutive integers.

    Only a note is made; the column stays. Common practice, no source.
    """
    values = series.dropna()
    if len(values) < 20 or values.nunique() != len(values):
        return False
    if _is_numeric(series):
        numbers = pd.to_numeric(values).to_numpy(dtype=float)
        whole = np.all(np.isfinite(numbers) & (numbers == np.round(numbers)))
        return bool(whole and numbers.max() - numbers.min() + 1 == len(numbers))
    return not pd.api.types.is_bool_dtype(series.dtype)


_PROFILE_BYTES = 64 << 20  # working memory of one piece of the float profile


def _float_extremes(values: np.ndarray):
    """Smallest and largest value of each column, whether all are whole numbers and whether
    there are at most two values (missing values aside)."""
    with np.errstate(invalid="ignore"):
        gaps = np.isnan(values)
        if gaps.any():  # smallest and largest values, whole numbers and two values: of the rest
            lo = np.where(gaps, np.inf, values).min(axis=0)
            hi = np.where(gaps, -np.inf, values).max(axis=0)
            whole = np.all(gaps | (np.isfinite(values) & (values == np.round(values))), axis=0)
            two = np.all(gaps | (values == lo) | (values == hi), axis=0)
        else:
            lo, hi = values.min(axis=0), values.max(axis=0)
            whole = np.all(np.isfinite(values) & (values == np.round(values)), axis=0)
            two = np.all((values == lo) | (values == hi), axis=0)
    return lo, hi, whole, two


def _float_profile(table: pd.DataFrame, names) -> dict[str, tuple[str, int, bool]]:
    """Kind, distinct-level count and "all whole numbers" of every float64 column, computed
    with numpy for many columns at once (large numeric tables are the common case).

    Level counts above 11 are reported as 11 + 1; only their side of the cut-offs matters.
    """
    floats = [n for n, t in zip(names, table.dtypes) if t == np.float64]
    if not floats:
        return {}
    values = table[floats].to_numpy()
    # in pieces of columns: the temporaries (rounded values, masks) of a piece stay within
    # _PROFILE_BYTES instead of adding a copy of a large table (reductions per column: the
    # same answers as one pass)
    step = max(1, _PROFILE_BYTES // (8 * max(len(values), 1)))
    parts = [_float_extremes(values[:, a:a + step]) for a in range(0, values.shape[1], step)]
    lo, hi, whole, two = (np.concatenate(p) for p in zip(*parts))
    infinite = (lo == -np.inf) | (hi == np.inf)  # an infinity among the values
    out = {}
    for j, n in enumerate(floats):
        if lo[j] > hi[j]:
            out[n] = ("continuous", 0, True)  # all missing
        elif lo[j] == hi[j]:
            out[n] = ("continuous", 1, bool(whole[j]))
        elif two[j]:
            out[n] = ("binary", 2, bool(whole[j]))
        elif whole[j] or infinite[j]:
            column = table[n]
            out[n] = (column_kind(column), int(column.nunique(dropna=True)), bool(whole[j]))
        else:
            out[n] = ("continuous", _ORDINAL_MAX_LEVELS + 2, False)
    return out


def _flat_columns(block: pd.DataFrame) -> list[str]:
    """Columns of ``block`` with fewer than two distinct values (float columns at once)."""
    floats = {n for n, t in zip(block.columns, block.dtypes) if t == np.float64}
    flat = set(floats)  # with no rows, every column is flat
    if floats and len(block):
        names = [n for n in block.columns if n in floats]
        values = block[names].to_numpy()
        same = (values.min(axis=0) == values.max(axis=0)).tolist()
        flat = {n for n, s in zip(names, same) if s}
    return [n for n in block.columns
            if (n in flat if n in floats else block[n].nunique() < 2)]


_DECIMAL_COMMA = re.compile(r"^[-+]?\d*,\d+$")
_THOUSANDS = {",": re.compile(r"^[-+]?\d{1,3}(,\d{3})+(\.\d+)?$"),
              ".": re.compile(r"^[-+]?\d{1,3}(\.\d{3})+(,\d+)?$"),
              " ": re.compile(r"^[-+]?\d{1,3}( \d{3})+([.,]\d+)?$"),
              "'": re.compile(r"^[-+]?\d{1,3}('\d{3})+(\.\d+)?$")}
_DATE_LIKE = re.compile(r"\d{1,4}[-/.:]\d{1,2}")
_BINARY_WORDS = ({"yes", "no"}, {"y", "n"}, {"true", "false"}, {"t", "f"})
_ID_MIN_ROWS = 20  # fewer rows say too little to call a column an identifier
_ID_DISTINCT_SHARE = 0.95  # "a different value in almost every row"; common practice, no source


def _texty(series: pd.Series) -> bool:
    """True for object and string columns (pandas 3 reads text as its own string type)."""
    return series.dtype == object or pd.api.types.is_string_dtype(series.dtype)


def _number_format_problem(series: pd.Series, number_format) -> str | None:
    """How a text column would read as numbers: the option to give, or None.

    A column is judged only when every value (of the first 500) is a number written with a
    decimal comma or a thousands separator (``"1,5"``, ``"12,300"``, ``"1.250,75"``), or a
    plain whole number.
    """
    decimal, thousands = number_format
    values = series.dropna()
    if not len(values) or pd.api.types.infer_dtype(values, skipna=True) != "string":
        return None
    sample = values.iloc[:500].astype(str).str.strip()
    whole = sample.str.match(r"^[-+]?\d+$")
    for mark, pattern in _THOUSANDS.items():
        if mark == thousands:
            continue
        grouped = sample.str.match(pattern)
        if grouped.any() and (grouped | whole).all() and not (
                mark == "," and sample.str.match(r"^[-+]?\d{1,3},\d{3}$").all()
                and decimal != ","):
            shown = f"'{mark}'" if mark in " '" else mark
            extra = " --decimal ," if mark in ". " and sample.str.contains(",").any() else ""
            return (f"numbers with a thousands separator ({sample[grouped].iloc[0]!r}); read "
                    f"the file with --thousands {shown}{extra} (thousands={mark!r} in "
                    f"read_table)")
    if decimal != ",":
        comma = sample.str.match(_DECIMAL_COMMA)
        if comma.any() and (comma | whole).all():
            return (f"numbers with a decimal comma ({sample[comma].iloc[0]!r}); read the file "
                    f"with --decimal , (decimal=',' in read_table; the separator is then "
                    f"usually ';')")
    return None


def _binary_words(series: pd.Series) -> tuple[str, str] | None:
    """``("yes", "no")`` style labels of a two-valued text or boolean column (true first)."""
    if pd.api.types.is_bool_dtype(series.dtype):
        return ("TRUE", "FALSE")
    if not _texty(series):
        return None
    values = series.dropna()
    if not len(values) or pd.api.types.infer_dtype(values, skipna=True) not in (
            "string", "boolean", "mixed"):
        return None
    if pd.api.types.infer_dtype(values, skipna=True) == "boolean":
        return ("TRUE", "FALSE")
    seen = set(values.astype(str).str.strip().unique())
    lowered = {v.lower() for v in seen}
    for words in _BINARY_WORDS:
        if lowered <= words and len(lowered) == 2:
            true = next(w for w in ("yes", "y", "true", "t") if w in words)
            spelled = {v.lower(): v for v in seen}
            return (spelled[true], spelled[next(iter(words - {true}))])
    return None


def _as_binary(series: pd.Series) -> pd.Series:
    """A yes/no, y/n, true/false or boolean column as 1.0 / 0.0 (missing stays missing)."""
    if pd.api.types.is_bool_dtype(series.dtype):
        return series.astype(float)
    lowered = series.map(lambda v: v if v is None or v != v else str(v).strip().lower())
    mapping = {"yes": 1.0, "y": 1.0, "true": 1.0, "t": 1.0,
               "no": 0.0, "n": 0.0, "false": 0.0, "f": 0.0}
    return lowered.map(lambda v: mapping.get(v, np.nan) if isinstance(v, str) else
                       (float(v) if isinstance(v, (bool, np.bool_)) else np.nan))


def _unsearchable(series: pd.Series) -> str | None:
    """Why a column cannot be a variable of the search, or None.

    ``"date/time"``: a datetime type, or text that parses as dates/times; ``"identifier"``:
    text (or a run of consecutive whole numbers) with a different value in almost every row;
    ``"free text"``: such text made of several words. These carry no dependence a test can
    read (each level is seen about once), and their tests return no p-value.
    """
    if pd.api.types.is_datetime64_any_dtype(series.dtype) or \
            pd.api.types.is_timedelta64_dtype(series.dtype):
        return "date/time"
    values = series.dropna()
    if not len(values):
        return None
    if _texty(series) and pd.api.types.infer_dtype(values, skipna=True) in (
            "datetime", "date", "time", "datetime64"):
        return "date/time"
    is_text = _texty(series) and pd.api.types.infer_dtype(values, skipna=True) in (
        "string", "mixed")
    if is_text:
        sample = values.iloc[:200].astype(str)
        if sample.str.contains(_DATE_LIKE).mean() >= 0.9:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                parsed = pd.to_datetime(sample, errors="coerce", format="mixed")
            if parsed.notna().mean() >= 0.9:
                return "date/time"
    if len(values) < _ID_MIN_ROWS:
        return None
    if not is_text and pd.api.types.is_float_dtype(values.dtype):
        numbers = values.to_numpy(dtype=float)
        if not np.all(numbers == np.round(numbers)):
            return None  # measurements, not a row number: skip the costly count of values
    if values.nunique() < _ID_DISTINCT_SHARE * len(values):
        return None
    if is_text:
        words = values.iloc[:200].astype(str).str.split().str.len().mean()
        return "free text" if words >= 3 else "identifier"
    if _is_numeric(series) and values.nunique() == len(values):
        numbers = pd.to_numeric(values).to_numpy(dtype=float)
        whole = np.all(np.isfinite(numbers) & (numbers == np.round(numbers)))
        if whole and numbers.max() - numbers.min() + 1 == len(numbers):
            return "identifier"
    return None


def _prepare(frame: pd.DataFrame, *, columns, exclude, missing: str, source: str | None,
             label: str, sha256: str, number_format=(".", None),
             include=None) -> tuple[Dataset, list[str]]:
    names = [str(c) for c in frame.columns]
    counted = Counter(names)
    duplicates = [n for n in counted if counted[n] > 1]
    if duplicates:
        raise _fail(label, f"column name {duplicates[0]!r} appears "
                           f"{counted[duplicates[0]]} times; rename the copies")
    # the caller's frame is never modified: a copy, lazy (no bytes copied until a column is
    # changed) where pandas copies on write, as pandas 3 always does
    table = frame.copy(deep=not _copies_on_write())
    table.columns = names
    table = table.reset_index(drop=True)

    selected = _as_names(columns, "columns")
    dropped = _as_names(exclude, "exclude")
    kept_anyway = _as_names(include, "include") or []
    _check_known(selected, "columns", names, label)
    _check_known(dropped, "exclude", names, label)
    _check_known(kept_anyway, "include", names, label)

    for n in names:  # a number column read as text because of its number format
        if _texty(table[n]) and (selected is None or n in selected) and \
                (dropped is None or n not in dropped):
            problem = _number_format_problem(table[n], number_format)
            if problem:
                raise _fail(label, f"column {n!r} holds {problem}")
    notes: list[str] = []
    for n in names:  # yes/no, true/false columns become 1/0
        if table[n].dtype == np.float64:
            continue
        words = _binary_words(table[n])
        if words is not None:
            table[n] = _as_binary(table[n])
            if (selected is None or n in selected) and (dropped is None or n not in dropped):
                notes.append(f"column {n!r} ({words[0]}/{words[1]}) read as binary: "
                             f"1 = {words[0]}, 0 = {words[1]}")

    rows_read = len(table)
    fast = _float_profile(table, names)
    kinds = {n: fast[n][0] if n in fast else column_kind(table[n]) for n in names}
    shares = table.isna().mean()
    missing_share = dict(zip(names, map(float, shares.tolist())))
    levels = {n: fast[n][1] if n in fast else int(table[n].nunique(dropna=True))
              for n in names}

    excluded: dict[str, str] = {}
    for n in names:
        if selected is not None and n not in selected:
            excluded[n] = "not selected"
        elif dropped is not None and n in dropped:
            excluded[n] = "excluded on request"
    warns: list[str] = []
    left_out: dict[str, list[str]] = {}
    for n in names:  # identifiers, dates and free text, unless named in `columns`
        if n in excluded or (selected is not None and n in selected) or n in kept_anyway:
            continue
        why = _unsearchable(table[n])
        if why is not None:
            excluded[n] = why
            left_out.setdefault(why, []).append(n)
    for why, group in left_out.items():
        looks = {"date/time": "dates or times", "identifier": "an identifier (a different "
                 "value in almost every row)", "free text": "free text (a different value in "
                 "almost every row)"}[why]
        notes.append(f"{_columns_word(group)} {_quote_list(group)} "
                     f"look{'s' if len(group) == 1 else ''} like {looks} and "
                     f"{'was' if len(group) == 1 else 'were'} left out of the search; to keep "
                     f"{'it' if len(group) == 1 else 'them'}, add --include "
                     f"{','.join(group)} (include=[...] in read_table)")

    empty = [n for n in names if n not in excluded and levels[n] == 0]
    constant = [n for n in names if n not in excluded and levels[n] == 1]
    for n in empty:
        excluded[n] = "all missing"
    for n in constant:
        excluded[n] = "constant"
    if empty:
        text = (f"{_columns_word(empty)} {_quote_list(empty)} "
                f"{'has' if len(empty) == 1 else 'have'} no values")
        warns.append(f"{label}: {text}; left out of the search")
        notes.append(f"{text} and {'was' if len(empty) == 1 else 'were'} left out")
    if constant:
        shown = ", ".join(f"{n!r} is always {_plain(table[n].dropna().iloc[0])}"
                          for n in constant[:3])
        text = (f"{_columns_word(constant)} {_quote_list(constant)} "
                f"{'is' if len(constant) == 1 else 'are'} constant ({shown}"
                f"{', ...' if len(constant) > 3 else ''})")
        warns.append(f"{label}: {text}; left out of the search")
        notes.append(f"{text} and {'was' if len(constant) == 1 else 'were'} left out")

    used = [n for n in names if n not in excluded]
    if used and missing == "drop":
        while True:
            complete = table[used].notna().all(axis=1)
            if not complete.any():
                worst = max(used, key=lambda n: missing_share[n])
                raise _fail(label, f"every one of the {rows_read} rows has a missing value in "
                                   f"some used column, so none is left; leave out the "
                                   f"columns with the most missing values (e.g. {worst!r}, "
                                   f"{100 * missing_share[worst]:.0f}% missing) or use the "
                                   f"test-wise missing policy")
            flat = _flat_columns(table.loc[complete, used])
            if not flat:
                break
            for n in flat:
                excluded[n] = "constant in the complete rows"
            used = [n for n in used if n not in flat]
            text = (f"{_columns_word(flat)} {_quote_list(flat)} "
                    f"{'is' if len(flat) == 1 else 'are'} constant in the rows without "
                    f"missing values")
            warns.append(f"{label}: {text}; left out of the search")
            notes.append(f"{text} and {'was' if len(flat) == 1 else 'were'} left out")
        kept = table.loc[complete, used]
        lost = rows_read - len(kept)
        if lost:
            notes.append(f"{lost} of {rows_read} rows with missing values dropped "
                         f"(missing policy 'drop')")
    elif used:
        present = table[used].notna().any(axis=1)
        kept = table.loc[present, used]
        lost = rows_read - len(kept)
        if lost:
            notes.append(f"{lost} of {rows_read} rows with no value in any used column "
                         f"dropped")
        gaps = int(kept.isna().any(axis=1).sum())
        if gaps:
            notes.append(f"{gaps} rows with missing values kept; each test uses the rows "
                         f"complete on its own variables (missing policy 'test-wise')")
    else:
        kept = table[[]]
    kept = kept.reset_index(drop=True)

    for n in used:
        if (selected is None or n not in selected) and n not in kept_anyway:
            continue  # only a column kept on request can still look like one
        if n in fast and fast[n][2] is False:
            continue  # a float column with fractional values is no identifier
        if _looks_like_identifier(kept[n]):
            notes.append(f"column {n!r} has a different value in every row (a row number or "
                         f"a code?); if it is an identifier, leave it out")

    dataset = Dataset(
        frame=kept,
        kinds=_FrozenMap(kinds),
        missing_share=_FrozenMap(missing_share),
        excluded=_FrozenMap((n, excluded[n]) for n in names if n in excluded),
        source=source,
        sha256=sha256,
        rows_read=rows_read,
        rows_used=len(kept),
        missing=missing,
        notes=tuple(notes),
    )
    return dataset, warns


# --------------------------------------------------------------------------- search checks

def _test_name(test) -> str:
    if isinstance(test, str):
        return test
    return str(getattr(test, "name", type(test).__name__))


def _text_values(series: pd.Series) -> list:
    """The distinct non-missing values of ``series`` that are not numbers, in order seen."""
    if pd.api.types.is_bool_dtype(series.dtype) or _is_numeric(series):
        return []
    values = series.dropna()
    as_numbers = pd.to_numeric(values, errors="coerce")
    return list(dict.fromkeys(values[as_numbers.isna()].tolist()))


def _clearly_independent(correlation: np.ndarray) -> bool:
    """True when no column of a correlation matrix is close to a linear function of others.

    Cholesky pivots squared are the ratios det(C[:k+1]) / det(C[:k]) (the share of a column's
    variance left after regressing it on the earlier ones); a clearly positive smallest one
    rules out exact collinearity at a third of the cost of an eigenvalue decomposition.
    """
    if not np.isfinite(correlation).all():
        return False
    try:
        return bool((np.diag(np.linalg.cholesky(correlation)) ** 2).min() > _SCREEN_RTOL)
    except np.linalg.LinAlgError:
        return False


def _collinear_groups(values: np.ndarray, names: list[str],
                      correlation: np.ndarray | None = None) -> list[list[str]]:
    """Groups of columns tied by an exact linear relation, from the data's null space.

    The columns are standardized, so scale and offset do not matter; singular values of the
    matrix below ``_COLLINEAR_RTOL`` times the largest give the null space. Its basis is
    brought to reduced row-echelon form so that separate relations come out as separate
    sparse vectors; columns whose vectors share a column are merged.
    """
    n, p = values.shape
    if p < 2 or n <= p:
        return []  # with no more rows than columns every set of columns is dependent
    if correlation is not None and correlation.shape == (p, p) and _clearly_independent(
            correlation):
        return []
    spread = values.std(axis=0)
    keep = spread > 0
    if keep.sum() < 2:
        return []
    z = (values[:, keep] - values[:, keep].mean(axis=0)) / spread[keep]
    kept_names = [nm for nm, k in zip(names, keep) if k]
    # Cheap screen first: only a correlation matrix close to singular calls for the exact
    # (costly) SVD below.
    if _clearly_independent(z.T @ z / n):
        return []
    _, s, vt = np.linalg.svd(z / np.sqrt(n), full_matrices=False)
    null = vt[s <= _COLLINEAR_RTOL * s[0]]
    if len(null) == 0:
        return []
    basis = null.copy()
    row = 0
    for col in range(basis.shape[1]):
        if row == len(basis):
            break
        pivot = row + int(np.argmax(np.abs(basis[row:, col])))
        if abs(basis[pivot, col]) < 1e-8:
            continue
        basis[[row, pivot]] = basis[[pivot, row]]
        basis[row] /= basis[row, col]
        for other in range(len(basis)):
            if other != row:
                basis[other] -= basis[other, col] * basis[row]
        row += 1
    groups: list[set[int]] = []
    for vector in basis:
        support = set(np.flatnonzero(np.abs(vector) > 1e-6 * np.abs(vector).max()))
        touching = [g for g in groups if g & support]
        for g in touching:
            support |= g
            groups.remove(g)
        groups.append(support)
    return [[kept_names[i] for i in sorted(g)] for g in groups if len(g) > 1]


def check_for_search(dataset: Dataset, *, test="fisher-z", max_depth: int | None = None,
                     collinearity: bool = True) -> None:
    """Check that a dataset can be searched with the chosen independence test.

    Parameters
    ----------
    dataset : Dataset
        From :func:`read_table` or :func:`prepare_frame`.
    test : str or object
        The independence test's name (or an object with a ``name``). The checks on numbers,
        depth and collinearity apply to ``"fisher-z"``; the others to every test.
    max_depth : int, optional
        The largest conditioning-set size the search may use.

    Raises
    ------
    DataValidationError
        - fewer than two usable variables (nothing to search);
        - Fisher's z and a column holding text: the test needs numbers;
        - a column holding infinite values, which no test can use;
        - fewer than 5 rows, or, for Fisher's z with ``max_depth`` given, fewer than
          ``max_depth + 4`` rows (its statistic needs ``n - |S| - 3 > 0``);
        - Fisher's z and columns that are perfectly collinear (one is an exact linear
          combination of others, judged on the complete rows): their partial correlations
          are undefined. The message names the columns; drop one of them.

    Notes
    -----
    Collinearity is judged only when the complete rows outnumber the numeric columns; with
    fewer rows every set of columns is trivially dependent, and the search caps its depth.
    """
    label = dataset.label
    name = _test_name(test)
    fisher = name == "fisher-z"
    frame = dataset.frame

    if len(dataset.variables) < 2:
        have = (f"only {dataset.variables[0]!r} is usable" if dataset.variables
                else "no column is usable")
        left = (f" (left out: {_quote_list(list(dataset.excluded)[:4])}"
                f"{', ...' if len(dataset.excluded) > 4 else ''})" if dataset.excluded else "")
        raise _fail(label, f"a search needs at least 2 variables, but {have}{left}; "
                           f"select more columns")

    floats = {c for c, t in zip(frame.columns, frame.dtypes) if t == np.float64}
    if fisher:
        for column in dataset.variables:
            if column in floats:
                continue  # float columns hold numbers (or NaN) only
            texts = _text_values(frame[column])
            if texts:
                shown = ", ".join(repr(v) for v in texts[:2]) + (", ..." if len(texts) > 2 else "")
                raise _fail(label, f"column {column!r} holds text ({shown}); Fisher's z needs "
                                   f"numbers — exclude it with --columns or choose a test "
                                   f"for categorical data")
            if not (pd.api.types.is_bool_dtype(frame[column].dtype)
                    or _is_numeric(frame[column]) or frame[column].notna().sum() == 0):
                raise _fail(label, f"column {column!r} is not numeric (type "
                                   f"{frame[column].dtype}); Fisher's z needs numbers — "
                                   f"exclude it with --columns")

    infinite = {}
    float_columns = [c for c in dataset.variables if c in floats]
    if float_columns:
        block = (frame if len(float_columns) == frame.shape[1] else frame[float_columns])
        block = block.to_numpy()
        # a finite sum rules out infinities in one pass; otherwise look closer (the sum can
        # also be NaN from missing cells, or overflow)
        with np.errstate(invalid="ignore", over="ignore"):
            total = block.sum()
        if not np.isfinite(total) and np.isinf(block).any():
            counts = np.isinf(block).sum(axis=0)
            infinite.update((c, int(k)) for c, k in zip(float_columns, counts) if k)
    for column in dataset.variables:
        if column in floats:
            continue
        if _is_numeric(frame[column]):
            count = int(np.isinf(pd.to_numeric(frame[column]).to_numpy(dtype=float)).sum())
            if count:
                infinite[column] = count
    if infinite:
        (first, count), rest = next(iter(infinite.items())), list(infinite)[1:]
        also = f" (also in {_quote_list(rest)})" if rest else ""
        raise _fail(label, f"column {first!r} holds {count} infinite "
                           f"value{'s' if count > 1 else ''}{also}; replace them with numbers "
                           f"or mark them missing, or remove those rows")

    rows = dataset.rows_used
    if rows < _MIN_ROWS:
        policy = (" or use the test-wise missing policy"
                  if dataset.missing == "drop" and dataset.rows_read > rows else "")
        raise _fail(label, f"only {rows} usable rows; a search needs at least {_MIN_ROWS} "
                           f"(and many more for trustworthy tests) — add rows{policy}")
    if fisher and max_depth is not None and rows < max_depth + _FISHER_Z_EXTRA_ROWS:
        deepest = rows - _FISHER_Z_EXTRA_ROWS
        raise _fail(label, f"only {rows} usable rows, but Fisher's z at depth {max_depth} "
                           f"needs at least {max_depth + _FISHER_Z_EXTRA_ROWS}; lower "
                           f"--max-depth to {deepest} or less, or add rows")

    if fisher and collinearity:
        check_collinearity(dataset)


def check_collinearity(dataset: Dataset, *, correlation=None) -> None:
    """Raise DataValidationError naming perfectly collinear numeric columns.

    ``correlation``, when given, is the correlation matrix of ``dataset.variables`` (in that
    order) that a test has already computed; it makes the common case (no collinearity)
    cost one small eigenvalue decomposition.
    """
    frame = dataset.frame
    if (correlation is not None and correlation.shape == (len(dataset.variables),) * 2
            and _clearly_independent(correlation)):
        return  # the common case, settled by the test's own correlation matrix
    numeric = [c for c in dataset.variables
               if _is_numeric(frame[c]) or pd.api.types.is_bool_dtype(frame[c].dtype)]
    if len(numeric) != len(dataset.variables):
        correlation = None
    complete = frame[numeric].dropna()
    if len(complete) != len(frame):
        correlation = None
    if all(complete[c].dtype == np.float64 for c in numeric):
        values = complete.to_numpy(dtype=float)
    else:
        values = complete.apply(pd.to_numeric).to_numpy(dtype=float)
    groups = _collinear_groups(values, numeric, correlation)
    if groups:
        where = " in the complete rows" if dataset.missing == "test-wise" else ""
        also = "".join(f", and so are {_quote_list(g)}" for g in groups[1:])
        which = "one of them" if len(groups) == 1 else "one column from each group"
        raise _fail(dataset.label, f"columns {_quote_list(groups[0])} are perfectly collinear"
                                   f"{where} (one is an exact linear combination of the "
                                   f"others){also}; Fisher's z cannot separate them — drop "
                                   f"{which}, e.g. with --columns")
