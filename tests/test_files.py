"""Outputs: checked before work, written atomically, umask respected, errors name the user's path."""

from __future__ import annotations

import os
import stat

import pytest

from powderspin.files import (
    OutputExistsError,
    OutputPathError,
    atomic_output,
    check_outputs,
    write_text_atomic,
    write_via,
)


@pytest.mark.parametrize("mask", [0o022, 0o027, 0o077])
def test_new_files_follow_the_umask(tmp_path, mask):
    old = os.umask(mask)
    try:
        p = write_text_atomic(tmp_path / "a.csv", "x\n")
        q = write_via(tmp_path / "b.bin", lambda t: t.write_bytes(b"y"))
    finally:
        os.umask(old)
    for f in (p, q):
        assert stat.S_IMODE(f.stat().st_mode) == 0o666 & ~mask


def test_nothing_is_left_behind_on_error(tmp_path):
    dest = tmp_path / "out.csv"
    with pytest.raises(RuntimeError):
        with atomic_output(dest) as tmp:
            tmp.write_text("half")
            raise RuntimeError("stop")
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(KeyboardInterrupt):
        with atomic_output(dest) as tmp:
            tmp.write_text("half")
            raise KeyboardInterrupt
    assert list(tmp_path.iterdir()) == []


def test_existing_files_and_inputs_are_never_replaced(tmp_path):
    mine = tmp_path / "mine.csv"
    mine.write_text("precious")
    with pytest.raises(OutputExistsError, match="--force"):
        write_text_atomic(mine, "new")
    assert mine.read_text() == "precious"
    with pytest.raises(OutputExistsError, match="input file"):
        write_text_atomic(mine, "new", force=True, protect=[mine])
    assert mine.read_text() == "precious"
    write_text_atomic(mine, "new", force=True)
    assert mine.read_text() == "new"


def test_errors_name_the_users_path_not_a_temporary_file(tmp_path):
    folder = tmp_path / "folder"
    folder.mkdir()
    with pytest.raises(OutputPathError) as e:
        write_text_atomic(folder, "x", force=True)
    assert str(folder) in str(e.value) and ".part" not in str(e.value)
    with pytest.raises(OutputPathError) as e:
        write_text_atomic("/proc/powderspin-out.csv", "x")
    assert "/proc/powderspin-out.csv" in str(e.value) and ".part" not in str(e.value)


def test_outputs_are_checked_together_before_any_work(tmp_path):
    with pytest.raises(OutputPathError, match="same file"):
        check_outputs([(tmp_path / "a.csv", "output"), (tmp_path / "a.csv", "plot")])
    with pytest.raises(OutputPathError, match="suffix"):
        check_outputs([(tmp_path / "a.gif", "plot", (".png", ".pdf", ".svg"))])
    with pytest.raises(OutputPathError, match="standard output"):
        check_outputs([("-", "plot", (".png",))])
    check_outputs([("-", "output"), (tmp_path / "p.png", "plot", (".png",))])


def test_dash_is_standard_output(capsys):
    assert write_text_atomic("-", "hello\n") is None
    assert capsys.readouterr().out == "hello\n"


def test_a_transaction_writes_all_files_at_the_end_or_none(tmp_path):
    from powderspin.files import output_transaction

    a, b = tmp_path / "a.csv", tmp_path / "b.png"
    with output_transaction() as t:
        write_text_atomic(a, "one")
        write_via(b, lambda p: p.write_bytes(b"two"))
        assert not a.exists() and not b.exists()  # staged, not yet in place
    assert t.written == [a, b] and a.read_text() == "one"
    for p in (a, b):
        p.write_text("earlier")
    with pytest.raises(KeyboardInterrupt):
        with output_transaction():
            write_text_atomic(a, "new", force=True)
            raise KeyboardInterrupt
    assert a.read_text() == "earlier" and sorted(p.name for p in tmp_path.iterdir()) == ["a.csv", "b.png"]


def test_check_outputs_can_refuse_a_missing_folder(tmp_path):
    with pytest.raises(OutputPathError, match="does not exist"):
        check_outputs([(tmp_path / "no" / "a.csv", "output")], make_folders=False)
    check_outputs([(tmp_path / "no" / "a.csv", "output")])  # the API makes folders
    assert not (tmp_path / "no").exists()


def test_texts_written_together_or_not_at_all(tmp_path):
    from powderspin.files import OutputExistsError, output_transaction, write_texts_together

    a, b = tmp_path / "a.txt", tmp_path / "b.txt"
    b.write_text("the user's")
    with pytest.raises(OutputExistsError):
        write_texts_together([(a, "one", "A"), (b, "two", "B")])
    assert not a.exists() and b.read_text() == "the user's"
    assert sorted(q.name for q in tmp_path.iterdir()) == ["b.txt"]
    # with force, an existing file replaced; inside a transaction, the files join it and appear at its end
    with output_transaction() as t:
        out = write_texts_together([(a, "one", "A"), (b, "two", "B")], force=True)
        assert not a.exists() and b.read_text() == "the user's"
    assert out == [a, b] and t.written == [a, b]
    assert a.read_text() == "one" and b.read_text() == "two"
