"""Tests for discovery.data: reading tables, column kinds, missing values, search checks.

Every file is written into pytest's tmp_path; the repository is never written to.
"""

from __future__ import annotations

import hashlib
import os
import re
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

from discovery.data import (
    KINDS,
    MISSING_MARKERS,
    Dataset,
    check_for_search,
    column_kind,
    prepare_frame,
    read_table,
)
from discovery.exceptions import DataValidationError, DegenerateDataWarning


def write(path, text: str | bytes):
    """Write ``text`` to ``path`` exactly as given (bytes, or UTF-8 with \\n line ends)."""
    data = text if isinstance(text, bytes) else text.encode("utf-8")
    path.write_bytes(data)
    return path


def fingerprint(path):
    stat = os.stat(path)
    return path.read_bytes(), stat.st_mtime_ns, stat.st_size


@pytest.fixture
def mixed_csv(tmp_path):
    # An invented table: a measurement, a yes/no answer, a 1-5 rating, a region name,
    # a count with many levels.
    rows = ["weight,smoker,rating,region,steps"]
    regions = ["north", "south", "east", "west"]
    for i in range(24):
        weight = "" if i in (3, 17) else f"{60 + 0.7 * i:.1f}"
        smoker = "NA" if i == 5 else ("yes" if i % 3 == 0 else "no")
        rating = str(1 + i % 5)
        region = regions[i % 4]
        steps = str(1000 + 37 * i)
        rows.append(",".join([weight, smoker, rating, region, steps]))
    return write(tmp_path / "mixed.csv", "\n".join(rows) + "\n")


def gaussian_frame(n=60, seed=1):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n),
                         "d": rng.normal(size=n)})


# --------------------------------------------------------------------------- kinds

def test_kinds_on_a_mixed_table(mixed_csv):
    data = read_table(mixed_csv)
    # The thresholds (2 levels binary, 3..10 integer levels ordinal) are common practice,
    # no source.
    assert dict(data.kinds) == {"weight": "continuous", "smoker": "binary",
                                "rating": "ordinal", "region": "categorical",
                                "steps": "continuous"}
    assert set(data.kinds.values()) <= set(KINDS)


@pytest.mark.parametrize("values, kind", [
    ([0.5, 1.25, 2.0, 3.75], "continuous"),
    (list(range(10)) * 2, "ordinal"),          # 10 integer levels: ordinal (common practice)
    (list(range(11)) * 2, "continuous"),       # 11 levels: continuous (common practice)
    ([1.0, 2.0, 3.0, np.nan, 2.0], "ordinal"),  # whole numbers stored as floats
    ([0, 1, 1, 0, np.nan], "binary"),
    (["yes", "no", None, "no"], "binary"),
    ([True, False, True], "binary"),
    (["a", "b", "c", "a"], "categorical"),
])
def test_column_kind(values, kind):
    assert column_kind(pd.Series(values)) == kind


def test_ordered_category_is_ordinal():
    grade = pd.Series(pd.Categorical(["low", "mid", "high", "low"],
                                     categories=["low", "mid", "high"], ordered=True))
    assert column_kind(grade) == "ordinal"
    assert column_kind(grade.astype(str)) == "categorical"


# --------------------------------------------------------------------------- missing values

def test_missing_share_counts_every_marker(tmp_path):
    # One column per marker, one missing cell each in 4 rows: share 1/4 everywhere.
    markers = [m for m in MISSING_MARKERS]
    header = ",".join(f"c{i}" for i in range(len(markers)))
    body = [",".join(markers)] + [",".join(str(r * 10 + i) for i in range(len(markers)))
                                  for r in range(1, 4)]
    path = write(tmp_path / "markers.csv", header + "\n" + "\n".join(body) + "\n")
    data = read_table(path, missing="test-wise")
    assert dict(data.missing_share) == {f"c{i}": 0.25 for i in range(len(markers))}
    # The rest of each column is numeric, so the markers did not turn it into text.
    assert all(pd.api.types.is_numeric_dtype(data.frame[c]) for c in data.variables)


def test_missing_share_of_mixed_table(mixed_csv):
    data = read_table(mixed_csv)
    # Counted by hand in the fixture: weight 2 of 24 empty, smoker 1 of 24 "NA".
    assert data.missing_share["weight"] == pytest.approx(2 / 24)
    assert data.missing_share["smoker"] == pytest.approx(1 / 24)
    assert data.missing_share["rating"] == 0.0


def test_drop_removes_incomplete_rows(mixed_csv):
    data = read_table(mixed_csv, missing="drop")
    assert data.rows_read == 24
    assert data.rows_used == 21 == len(data.frame)
    assert not data.frame.isna().any().any()
    assert any("3 of 24 rows" in note for note in data.notes)


def test_test_wise_keeps_rows_with_missing_values(mixed_csv):
    data = read_table(mixed_csv, missing="test-wise")
    assert data.rows_used == 24 == len(data.frame)
    assert int(data.frame["weight"].isna().sum()) == 2
    assert int(data.frame["smoker"].isna().sum()) == 1
    assert data.missing == "test-wise"


def test_drop_counts_only_used_columns(mixed_csv):
    # Leaving out the columns with gaps keeps every row.
    data = read_table(mixed_csv, exclude=["weight", "smoker"])
    assert data.rows_used == 24
    assert data.excluded == {"weight": "excluded on request", "smoker": "excluded on request"}


def test_all_rows_dropped_is_an_error(tmp_path):
    path = write(tmp_path / "holes.csv", "a,b,c\n1,,3\n,2,4\n5,6,\n7,,8\n")
    with pytest.raises(DataValidationError,
                       match=r"holes\.csv: every one of the 4 rows has a missing value.*"
                             r"'b'.*test-wise"):
        read_table(path)
    assert read_table(path, missing="test-wise").rows_used == 4


# --------------------------------------------------------------------------- selection

def test_columns_and_exclude_keep_file_order(mixed_csv):
    data = read_table(mixed_csv, columns=["steps", "rating", "weight"], exclude="rating")
    assert data.variables == ("weight", "steps")
    assert data.excluded == {"smoker": "not selected", "rating": "excluded on request",
                             "region": "not selected"}
    # kinds and missing shares still cover every column read.
    assert list(data.kinds) == ["weight", "smoker", "rating", "region", "steps"]
    assert list(data.missing_share) == list(data.kinds)


@pytest.mark.parametrize("option", ["columns", "exclude"])
def test_unknown_column_is_an_error(mixed_csv, option):
    with pytest.raises(DataValidationError,
                       match=rf"mixed\.csv: unknown column 'wieght' in '{option}'; "
                             r"did you mean 'weight'\?"):
        read_table(mixed_csv, **{option: ["wieght"]})


def test_unknown_missing_policy_is_an_error(mixed_csv):
    with pytest.raises(DataValidationError, match=r"mixed\.csv: .*'drop' or 'test-wise'.*'skip'"):
        read_table(mixed_csv, missing="skip")
    with pytest.raises(DataValidationError, match=r"^data: .*'drop' or 'test-wise'"):
        prepare_frame(gaussian_frame(), missing="pairwise")


# --------------------------------------------------------------------------- degenerate columns

def test_constant_column_is_excluded_with_a_warning(tmp_path):
    path = write(tmp_path / "site.csv", "x,site,y\n1.5,7,2\n2.5,7,1\n0.5,7,3\n")
    with pytest.warns(DegenerateDataWarning, match=r"site\.csv: column 'site' is constant"):
        data = read_table(path)
    assert data.variables == ("x", "y")
    assert data.excluded == {"site": "constant"}
    assert any("'site'" in note and "constant" in note for note in data.notes)


def test_warning_points_at_the_caller(tmp_path):
    # stacklevel=2: the warning is reported at the line that called read_table.
    path = write(tmp_path / "site.csv", "x,site,y\n1.5,7,2\n2.5,7,1\n0.5,7,3\n")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        read_table(path)
    assert [w.filename for w in caught] == [__file__]


def test_all_missing_column_is_excluded_with_a_warning(tmp_path):
    path = write(tmp_path / "gap.csv", "x,empty,y\n1.5,,2\n2.5,NA,1\n0.5,?,3\n")
    with pytest.warns(DegenerateDataWarning, match=r"gap\.csv: column 'empty' has no values"):
        data = read_table(path)
    assert data.excluded == {"empty": "all missing"}
    assert data.missing_share["empty"] == 1.0
    assert data.rows_used == 3  # an excluded column does not drop rows


def test_column_constant_in_complete_rows_is_excluded(tmp_path):
    # 'z' varies only in the row that 'y' leaves incomplete.
    path = write(tmp_path / "flat.csv", "x,y,z\n1,2,5\n2,3,5\n3,,9\n4,1,5\n")
    with pytest.warns(DegenerateDataWarning, match=r"'z' is constant in the rows without"):
        data = read_table(path)
    assert data.excluded == {"z": "constant in the complete rows"}
    assert data.variables == ("x", "y")


# --------------------------------------------------------------------------- file errors

def test_file_not_found(tmp_path):
    path = tmp_path / "absent.csv"
    with pytest.raises(DataValidationError, match=r"absent\.csv: file not found"):
        read_table(path)
    assert not path.exists()


def test_empty_file(tmp_path):
    path = write(tmp_path / "empty.csv", b"")
    with pytest.raises(DataValidationError, match=r"empty\.csv: the file is empty \(0 bytes\)"):
        read_table(path)


def test_header_only(tmp_path):
    path = write(tmp_path / "head.csv", "a,b,c\n")
    with pytest.raises(DataValidationError, match=r"head\.csv: has a header line but no data rows"):
        read_table(path)


def test_duplicate_column_names_are_named(tmp_path):
    # pandas would silently rename the second 'dose' to 'dose.1'.
    path = write(tmp_path / "dup.csv", "dose,age,dose\n1,2,3\n4,5,6\n")
    with pytest.raises(DataValidationError,
                       match=r"dup\.csv: the header names column 'dose' twice "
                             r"\(columns 1 and 3\); rename one of them"):
        read_table(path)


def test_duplicate_column_names_in_a_frame():
    frame = pd.DataFrame([[1, 2], [3, 4]], columns=["x", "x"])
    with pytest.raises(DataValidationError, match=r"data: column name 'x' appears 2 times"):
        prepare_frame(frame)


@pytest.mark.parametrize("body, line, cells", [
    ("a,b\n1,2\n3,4\n5,6,7\n", 4, 3),   # one cell too many
    ("a,b\n1,2\n3\n5,6\n", 3, 1),       # one cell short: pandas would pad it with NaN
])
def test_ragged_rows_name_the_line(tmp_path, body, line, cells):
    path = write(tmp_path / "ragged.csv", body)
    with pytest.raises(DataValidationError,
                       match=rf"ragged\.csv: line {line}: {cells} cells? where the header has 2"):
        read_table(path)


def test_bad_encoding_names_the_line(tmp_path):
    # Latin-1 'é' (0xe9) on line 3 is not valid UTF-8.
    path = write(tmp_path / "latin.csv", b"name,score\nab,1\n\xe9t\xe9,2\n")
    with pytest.raises(DataValidationError,
                       match=r"latin\.csv: line 3: byte 0xe9 is not UTF-8 text; re-save"):
        read_table(path)


def test_utf8_byte_order_mark_is_accepted(tmp_path):
    path = write(tmp_path / "bom.csv", b"\xef\xbb\xbfa,b\n1,2\n3,5\n")
    assert read_table(path).variables == ("a", "b")


def test_unsupported_file_type(tmp_path):
    path = write(tmp_path / "sheet.xlsx", b"PK\x03\x04 not really a workbook")
    with pytest.raises(DataValidationError, match=r"sheet\.xlsx: cannot read '\.xlsx' files; "
                                                  r"save the table as CSV"):
        read_table(path)


@pytest.mark.parametrize("name, body", [
    ("ok.csv", "a,b\n1,2\n3,5\n"),
    ("dup.csv", "a,a\n1,2\n"),
    ("ragged.csv", "a,b\n1,2,3\n"),
    ("latin.csv", b"a,b\n\xe9,1\n"),
    ("head.csv", "a,b\n"),
    ("holes.csv", "a,b\n1,\n,2\n3,\n,4\n"),
])
def test_input_file_is_never_changed(tmp_path, name, body):
    path = write(tmp_path / name, body)
    os.utime(path, ns=(1_600_000_000_000_000_000, 1_600_000_000_000_000_000))
    before = fingerprint(path)
    try:
        read_table(path)
    except DataValidationError:
        pass
    assert fingerprint(path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]


# --------------------------------------------------------------------------- fingerprints

def test_sha256_is_the_file_hash(mixed_csv):
    # hashlib is the outside reference for SHA-256 (FIPS 180-4).
    assert read_table(mixed_csv).sha256 == hashlib.sha256(mixed_csv.read_bytes()).hexdigest()


def test_sha256_of_a_frame_is_the_hash_of_its_names_and_values():
    # hashlib is the outside reference; the fingerprint is names + float64 bytes per column.
    frame = gaussian_frame()
    copy = frame.copy()
    data = prepare_frame(frame)
    h = hashlib.sha256()
    for name in frame.columns:
        h.update(name.encode() + b"\x00" + frame[name].to_numpy(dtype=float).tobytes())
    expected = h.hexdigest()
    assert data.sha256 == expected
    assert data.source is None
    pd.testing.assert_frame_equal(frame, copy)  # the caller's frame is not modified


# --------------------------------------------------------------------------- other formats

def test_tsv_by_extension(tmp_path):
    path = write(tmp_path / "table.tsv", "a\tb\tc\n1\t2.5\tx\n2\t3.5\ty\n3\t1.5\tx\n")
    data = read_table(path)
    assert data.variables == ("a", "b", "c")
    assert data.frame["b"].tolist() == [2.5, 3.5, 1.5]


@pytest.mark.parametrize("name", ["table.txt", "table.csv"])
def test_tab_separator_is_sniffed(tmp_path, name):
    path = write(tmp_path / name, "a\tb\n1\t2\n3\t5\n4\t4\n")
    data = read_table(path)
    assert data.variables == ("a", "b")
    assert data.frame["b"].tolist() == [2, 5, 4]


def test_parquet(tmp_path):
    pytest.importorskip("pyarrow")
    frame = gaussian_frame(n=12)
    frame["group"] = ["u", "v", "w"] * 4
    frame.loc[2, "a"] = np.nan
    path = tmp_path / "table.parquet"
    frame.to_parquet(path)
    data = read_table(path, missing="test-wise")
    assert data.variables == ("a", "b", "d", "group")
    assert data.kinds["group"] == "categorical"
    assert data.missing_share["a"] == pytest.approx(1 / 12)
    np.testing.assert_allclose(data.frame["b"].to_numpy(), frame["b"].to_numpy())
    assert data.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_parquet_without_pyarrow_says_what_to_install(tmp_path, monkeypatch):
    path = write(tmp_path / "table.parquet", b"PAR1 whatever")
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # makes `import pyarrow` fail
    with pytest.raises(DataValidationError,
                       match=r"table\.parquet: reading Parquet files needs pyarrow; "
                             r"run `pip install pyarrow`"):
        read_table(path)


def test_damaged_parquet(tmp_path):
    pytest.importorskip("pyarrow")
    path = write(tmp_path / "broken.parquet", b"this is not parquet at all")
    with pytest.raises(DataValidationError, match=r"broken\.parquet: not a readable Parquet"):
        read_table(path)


# --------------------------------------------------------------------------- search checks

def test_text_column_for_fisher_z(tmp_path):
    path = write(tmp_path / "survey.csv",
                 "age,income,score\n30,high,1.5\n41,low,2.5\n52,mid,0.5\n23,high,3.1\n"
                 "35,low,2.2\n")
    data = read_table(path)
    with pytest.raises(DataValidationError,
                       match=rf"^{re.escape(str(path))}: column 'income' holds text "
                             r"\('high', 'low', \.\.\.\); Fisher's z needs numbers — "
                             r"exclude it with --columns or choose a test for categorical data$"):
        check_for_search(data, test="fisher-z")
    check_for_search(read_table(path, exclude=["income"]), test="fisher-z")


def test_stray_text_in_a_numeric_column(tmp_path):
    path = write(tmp_path / "typo.csv", "a,b\n1.5,2\n2.5,3\n3.5,x4\n4.5,1\n5.5,7\n6.5,2\n")
    with pytest.raises(DataValidationError, match=r"column 'b' holds text \('x4'\)"):
        check_for_search(read_table(path))


def test_infinities_are_named_and_counted(tmp_path):
    rows = "\n".join(f"{i},{v},{i * 0.3 + (i % 3)}"
                     for i, v in enumerate(["1", "inf", "2", "-inf", "3", "4"]))
    path = write(tmp_path / "inf.csv", "a,b,c\n" + rows + "\n")
    with pytest.raises(DataValidationError,
                       match=r"inf\.csv: column 'b' holds 2 infinite values; replace them"):
        check_for_search(read_table(path))


def test_rows_needed_for_the_depth():
    # Fisher's z needs n - |S| - 3 > 0 (Fisher 1921), so depth d needs d + 4 rows.
    frame = gaussian_frame(n=8)
    data = prepare_frame(frame.iloc[:, :3])
    check_for_search(data, max_depth=4)  # 8 rows = 4 + 4: enough
    with pytest.raises(DataValidationError,
                       match=r"data: only 8 usable rows, but Fisher's z at depth 5 needs at "
                             r"least 9; lower --max-depth"):
        check_for_search(data, max_depth=5)


def test_at_least_five_rows():
    data = prepare_frame(gaussian_frame(n=4))
    with pytest.raises(DataValidationError, match=r"data: only 4 usable rows; .*at least 5"):
        check_for_search(data)


def test_fewer_than_two_variables():
    frame = gaussian_frame()
    with pytest.raises(DataValidationError,
                       match=r"data: a search needs at least 2 variables, but only 'a' is usable"):
        check_for_search(prepare_frame(frame, columns=["a"]))


def test_collinear_columns_are_named():
    frame = gaussian_frame(n=50)
    frame["c"] = frame["a"] + 2 * frame["b"]
    # Outside check (linear algebra via numpy): the columns a, b, c span only 2 dimensions.
    assert np.linalg.matrix_rank(frame[["a", "b", "c"]].to_numpy()) == 2
    data = prepare_frame(frame)
    with pytest.raises(DataValidationError,
                       match=r"data: columns 'a', 'b' and 'c' are perfectly collinear .*"
                             r"drop one of them") as info:
        check_for_search(data)
    assert "'d'" not in str(info.value)


def test_collinear_from_a_file_round_trip(tmp_path):
    frame = gaussian_frame(n=40)
    frame["c"] = frame["a"] + 2 * frame["b"]
    path = tmp_path / "lin.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(DataValidationError, match=r"lin\.csv: columns 'a', 'b' and 'c'"):
        check_for_search(read_table(path))


def test_duplicate_copies_are_both_named():
    frame = gaussian_frame(n=30)
    frame["x"] = frame["d"] * 3.0 + 1.0
    frame["x copy"] = frame["x"]
    with pytest.raises(DataValidationError,
                       match=r"columns 'd', 'x' and 'x copy' are perfectly collinear"):
        check_for_search(prepare_frame(frame))
    with pytest.raises(DataValidationError,
                       match=r"columns 'x' and 'x copy' are perfectly collinear"):
        check_for_search(prepare_frame(frame, exclude=["d"]))


def test_two_separate_collinear_groups_are_both_named():
    frame = gaussian_frame(n=40)
    frame["c"] = frame["a"] - frame["b"]
    frame["e"] = -2 * frame["d"]
    with pytest.raises(DataValidationError,
                       match=r"columns 'a', 'b' and 'c' are perfectly collinear .*"
                             r"and so are 'd' and 'e'.*one column from each group"):
        check_for_search(prepare_frame(frame))


def test_nearly_collinear_is_accepted():
    # Strongly but not exactly dependent: a valid (if hard) input for Fisher's z.
    frame = gaussian_frame(n=50)
    noise = np.random.default_rng(7).normal(scale=1e-3, size=50)
    frame["c"] = frame["a"] + 2 * frame["b"] + noise
    check_for_search(prepare_frame(frame))


def test_other_tests_skip_the_numeric_checks(tmp_path):
    path = write(tmp_path / "cat.csv", "u,v\na,x\nb,y\nc,x\na,y\nb,x\nc,y\n")
    data = read_table(path)
    check_for_search(data, test="g-squared")
    with pytest.raises(DataValidationError, match="column 'u' holds text"):
        check_for_search(data, test="fisher-z")


def test_identifier_column_gets_a_note():
    # A row number is flagged (consecutive integers, all distinct); a count with many
    # distinct levels is not. Common practice, no source.
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"row": np.arange(101, 131), "steps": 1000 + 37 * np.arange(30),
                          "y": rng.normal(size=30)})
    notes = prepare_frame(frame).notes
    assert any("'row'" in note and "identifier" in note for note in notes)
    assert not any("'steps'" in note for note in notes)


# --------------------------------------------------------------------------- the record

def test_dataset_is_frozen_and_summarises(mixed_csv):
    data = read_table(mixed_csv, exclude=["region"])
    assert isinstance(data, Dataset)
    with pytest.raises(AttributeError):
        data.rows_used = 0
    with pytest.raises(TypeError):
        data.kinds["weight"] = "binary"
    text = data.summary()
    lines = text.splitlines()
    assert lines[0].startswith(f"{mixed_csv}: 24 rows read, 21 used (missing: drop)")
    assert any(line.split()[:2] == ["region", "categorical"] and "excluded" in line
               for line in lines)
    assert any(line.split()[:3] == ["weight", "continuous", "8.3%"] for line in lines)


def test_dataset_pickles(mixed_csv):
    import pickle
    data = read_table(mixed_csv)
    back = pickle.loads(pickle.dumps(data))
    assert dict(back.kinds) == dict(data.kinds)
    pd.testing.assert_frame_equal(back.frame, data.frame)
