"""Writing files: the previous content survives a failed write; outputs land together or not at all."""

import os

import pytest

from discovery.files import (atomic_write, same_file, write_all_or_nothing,
                             write_text_atomic)


def test_a_failed_write_leaves_the_previous_file_and_no_temporary(tmp_path):
    path = tmp_path / "r.json"
    write_text_atomic(path, "good")
    with pytest.raises(RuntimeError, match="half-way"):
        with atomic_write(path) as tmp:
            tmp.write_text("partial")
            raise RuntimeError("killed half-way")
    assert path.read_text() == "good"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.json"]


def test_outputs_are_written_together_or_not_at_all(tmp_path):
    first, second = tmp_path / "a.json", tmp_path / "b.png"
    first.write_text("old a")

    def broken(_):
        raise OSError("disk full")

    with pytest.raises(OSError, match="disk full"):
        write_all_or_nothing([(first, lambda p: p.write_text("new a")), (second, broken)])
    assert first.read_text() == "old a" and not second.exists()
    write_all_or_nothing([(first, lambda p: p.write_text("new a")),
                          (second, lambda p: p.write_bytes(b"png"))])
    assert first.read_text() == "new a" and second.read_bytes() == b"png"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json", "b.png"]


def test_same_file_sees_through_relative_paths_and_hard_links(tmp_path):
    original = tmp_path / "data.csv"
    original.write_text("x\n1\n")
    link = tmp_path / "copy.csv"
    os.link(original, link)
    assert same_file(original, tmp_path / "sub" / ".." / "data.csv")
    assert same_file(original, link)
    assert not same_file(original, tmp_path / "other.csv")


def test_a_written_file_gets_the_usual_mode_not_a_private_one(tmp_path):
    # a file written with open() gets 0o666 less the umask (POSIX); a report meant for
    # colleagues must not come out readable by its owner only
    umask = os.umask(0o022)
    try:
        write_text_atomic(tmp_path / "r.html", "<p>report</p>")
        assert (tmp_path / "r.html").stat().st_mode & 0o777 == 0o644
        os.chmod(tmp_path / "r.html", 0o640)
        write_text_atomic(tmp_path / "r.html", "<p>again</p>")  # keeps the file's own mode
        assert (tmp_path / "r.html").stat().st_mode & 0o777 == 0o640
    finally:
        os.umask(umask)
