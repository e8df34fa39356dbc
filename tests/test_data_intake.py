"""Reading ordinary messy tables: separators, number formats, missing markers, line ends,
identifier / date / free-text columns, yes/no columns, and the options that steer them.

References: Python's csv module and pandas.read_csv read the same bytes as the reference for
what a cell holds; the conventions themselves (decimal comma with ';' separators in much of
Europe, thousands separators, 'n/a' / '#N/A' / '-' / '.' as missing markers from spreadsheets
and statistics packages) are common practice, no source.
"""

from __future__ import annotations

import io
import warnings

import numpy as np
import pandas as pd
import pytest

from discovery import discover, prepare_frame, read_table
from discovery.exceptions import DataValidationError


def write(path, text, newline="\n"):
    path.write_bytes(text.replace("\n", newline).encode("utf-8"))
    return path


def messy_frame(n=60, seed=0):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    return pd.DataFrame({
        "patient": [f"P{i:04d}" for i in range(n)],
        "visit": pd.date_range("2024-01-01", periods=n).strftime("%Y-%m-%d"),
        "comment": [f"felt fine on visit {i} today" for i in range(n)],
        "x": x, "y": x + rng.normal(size=n),
        "smoker": rng.choice(["yes", "no"], n),
    })


@pytest.mark.parametrize("sep, name", [(",", "t.csv"), (";", "t.csv"), ("|", "t.csv"),
                                       ("\t", "t.csv"), (";", "t.txt"), ("|", "t.dat"),
                                       (",", "t.tsv")])
def test_separator_is_detected_whatever_the_extension(tmp_path, sep, name):
    frame = pd.DataFrame({"a": [1.5, 2.5, 3.5, 4.5], "b": [1, 2, 3, 5], "c": ["u", "v", "u", "v"]})
    path = tmp_path / name
    path.write_text(frame.to_csv(sep=sep, index=False))
    data = read_table(path)
    assert data.variables == ("a", "b", "c")
    # pandas.read_csv with the true separator is the reference for the values
    reference = pd.read_csv(io.StringIO(frame.to_csv(sep=sep, index=False)), sep=sep)
    assert data.frame["a"].tolist() == reference["a"].tolist()
    assert data.frame["b"].tolist() == reference["b"].tolist()


def test_explicit_separator_wins(tmp_path):
    path = write(tmp_path / "t.csv", "a;b,c\n1;u,v\n4;w,v\n7;u,w\n")
    data = read_table(path, sep=";")
    assert data.variables == ("a", "b,c")


@pytest.mark.parametrize("newline", ["\n", "\r\n", "\r"])
def test_line_ends(tmp_path, newline):
    path = write(tmp_path / "t.csv", "a,b\n1,2\n3,5\n4,4\n", newline)
    data = read_table(path)
    assert data.rows_read == 3 and data.frame["b"].tolist() == [2, 5, 4]


def test_decimal_comma_error_names_the_option_and_the_option_reads_it(tmp_path):
    path = write(tmp_path / "t.csv", "a;b\n1,5;2\n2,25;3\n3,0;4\n")
    with pytest.raises(DataValidationError, match=r"column 'a' holds numbers with a decimal "
                                                  r"comma.*--decimal ,"):
        read_table(path)
    data = read_table(path, decimal=",")
    assert data.frame["a"].tolist() == [1.5, 2.25, 3.0]


def test_thousands_separator_error_names_the_option(tmp_path):
    path = write(tmp_path / "t.csv", 'a,b\n"1,250",2\n"12,300.5",3\n"1,000,000",4\n7,5\n')
    with pytest.raises(DataValidationError, match=r"column 'a' holds numbers with a thousands "
                                                  r"separator.*--thousands ,"):
        read_table(path)
    data = read_table(path, thousands=",")
    assert data.frame["a"].tolist() == [1250, 12300.5, 1_000_000, 7]


def test_european_number_format(tmp_path):
    path = write(tmp_path / "t.csv", "a;b\n1.250,5;2\n2.000,25;3\n3,0;4\n")
    data = read_table(path, decimal=",", thousands=".")
    assert data.frame["a"].tolist() == [1250.5, 2000.25, 3.0]


def test_option_values_are_checked(tmp_path):
    path = write(tmp_path / "t.csv", "a,b\n1,2\n3,4\n5,7\n")
    with pytest.raises(DataValidationError, match="decimal mark and the thousands separator"):
        read_table(path, decimal=",", thousands=",")
    with pytest.raises(DataValidationError, match="sep must be a single character"):
        read_table(path, sep=";;")


@pytest.mark.parametrize("marker", ["n/a", "N/A", "#N/A", "-", ".", "", "NA", "null"])
def test_common_missing_markers(tmp_path, marker):
    path = write(tmp_path / "t.csv", f"a,b\n1,2\n3,{marker}\n5,6\n7,8\n")
    data = read_table(path, missing="test-wise")
    assert data.missing_share["b"] == 0.25
    assert pd.api.types.is_numeric_dtype(data.frame["b"])


def test_extra_missing_markers(tmp_path):
    path = write(tmp_path / "t.csv", "a,b\n1,2\n3,-99\n5,6\n7,8\n")
    assert read_table(path, missing="test-wise").missing_share["b"] == 0
    data = read_table(path, missing="test-wise", na_values=["-99"])
    assert data.missing_share["b"] == 0.25


def test_identifier_date_and_free_text_are_left_out_with_a_note(tmp_path):
    path = tmp_path / "visits.csv"
    messy_frame().to_csv(path, index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        data = read_table(path)
    assert data.variables == ("x", "y", "smoker")
    assert dict(data.excluded) == {"patient": "identifier", "visit": "date/time",
                                   "comment": "free text"}
    for name in ("patient", "visit", "comment"):
        note = next(n for n in data.notes if repr(name) in n)
        assert "left out" in note and f"--include {name}" in note  # how to put it back
    # naming a column puts it back
    kept = read_table(path, columns=["visit", "x", "y"])
    assert kept.variables == ("visit", "x", "y")
    kept = read_table(path, include=["patient"])
    assert kept.variables == ("patient", "x", "y", "smoker")
    with pytest.raises(DataValidationError, match="unknown column 'nope' in 'include'"):
        read_table(path, include=["nope"])


def test_a_row_number_is_left_out_but_a_count_is_not():
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"row": np.arange(101, 131), "steps": 1000 + 37 * np.arange(30),
                          "y": rng.normal(size=30)})
    data = prepare_frame(frame)
    assert data.excluded.get("row") == "identifier"
    assert "steps" in data.variables


def test_categorical_column_with_repeats_is_kept():
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"site": rng.choice(list("ABCDEFGH"), 200), "y": rng.normal(size=200)})
    assert prepare_frame(frame).variables == ("site", "y")


def test_date_column_does_not_reach_the_search(tmp_path):
    # The date column used to stay in; its tests returned no p-value and every variable
    # ended up adjacent to it.
    path = tmp_path / "visits.csv"
    messy_frame(n=200).to_csv(path, index=False)
    result = discover(read_table(path), test="auto")
    assert set(result.variables) == {"x", "y", "smoker"}
    assert any("'visit'" in note and "left out" in note for note in result.notes)


@pytest.mark.parametrize("words", [("yes", "no"), ("TRUE", "FALSE"), ("Y", "N"),
                                   ("true", "false")])
def test_two_word_columns_are_binary_with_a_note(tmp_path, words):
    path = write(tmp_path / "t.csv",
                 "a,flag\n" + "".join(f"{i},{words[i % 2]}\n" for i in range(8)))
    data = read_table(path)
    assert data.kinds["flag"] == "binary"
    assert data.frame["flag"].tolist() == [1.0, 0.0] * 4
    assert any("'flag'" in n and "binary" in n for n in data.notes)


def test_exclude_leaves_columns_out(tmp_path):
    path = write(tmp_path / "t.csv", "a,b,c\n1,2,3\n2,1,5\n3,5,4\n4,3,3\n")
    data = read_table(path, exclude=["b", "c"])
    assert data.variables == ("a",)
    assert dict(data.excluded) == {"b": "excluded on request", "c": "excluded on request"}
    with pytest.raises(DataValidationError, match="unknown column 'd' in 'exclude'"):
        read_table(path, exclude=["d"])


def test_knowledge_about_an_excluded_column_is_dropped_with_a_note_in_the_library():
    from discovery import Knowledge
    from discovery.exceptions import KnowledgeError
    rng = np.random.default_rng(8)
    a = rng.normal(size=300)
    frame = pd.DataFrame({"a": a, "b": a + rng.normal(size=300), "d": rng.normal(size=300)})
    data = prepare_frame(frame, exclude=["d"])
    result = discover(data, knowledge=Knowledge(locked=[("b", "d")], forbidden=[("a", "b")],
                                                stages=[["a", "d"], ["b"]]))
    assert result.knowledge.locked == () and result.knowledge.stages == (("a",), ("b",))
    assert result.edge("a", "b") is None  # the rest of the knowledge still applies
    assert any("knowledge about 'd'" in n and "excluded on request" in n for n in result.notes)
    with pytest.raises(KnowledgeError, match=r"unknown variable\(s\) \['zz'\]"):
        discover(data, knowledge=Knowledge(locked=[("b", "zz")]))


def test_detected_separator_equal_to_the_decimal_mark_is_an_error(tmp_path):
    path = write(tmp_path / "t.csv", "a,b\n1,5\n2,6\n3,7\n")
    with pytest.raises(DataValidationError, match="detected separator ',' is also the "
                                                  "decimal mark"):
        read_table(path, decimal=",")
