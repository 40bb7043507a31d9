"""Reading user tables and writing outputs safely (ped2g.io)."""

import pandas as pd
import pytest

from ped2g.errors import UserError
from ped2g.io import output_dir, read_table


def test_reads_csv_and_tsv_as_strings_with_line_numbers(tmp_path):
    csv = tmp_path / "p.csv"
    csv.write_text("id,sire,dam\n007,A1, \nb,0,NA\n")
    tsv = tmp_path / "p.tsv"
    tsv.write_text("id\tsire\tdam\n007\tA1\t\nb\t0\tNA\n")
    for path in (csv, tsv):
        frame = read_table(path)
        assert list(frame.columns) == ["id", "sire", "dam"]
        assert frame.loc[2, "id"] == "007"  # leading zeros kept
        assert list(frame.index) == [2, 3]


def test_reads_excel(tmp_path):
    path = tmp_path / "p.xlsx"
    pd.DataFrame({"id": ["01", "02"], "sire": ["", "01"]}).to_excel(path, index=False)
    frame = read_table(path)
    assert frame["id"].tolist() == ["01", "02"]
    assert frame.loc[3, "sire"] == "01"


@pytest.mark.parametrize(
    ("content", "message"),
    [
        (b"", "is empty"),
        (b"id,sire\n", "no data rows"),
        (b"id,sire,dam\n1,0,0\n2,1\n", "line 3 has 2 fields but the header has 3"),
        (b"\x89PNG\r\n\x1a\n\x00\x00\x00", "binary file"),
        (b"id,sire\n\xe9t\xe9,0\n", "not UTF-8"),
        (b"id,id\n1,2\n", "column name 'id' twice"),
    ],
)
def test_unreadable_tables_give_one_clear_line(tmp_path, content, message):
    path = tmp_path / "t.csv"
    path.write_bytes(content)
    with pytest.raises(UserError, match=message) as info:
        read_table(path, what="pedigree table")
    assert "\n" not in str(info.value)
    assert str(path) in str(info.value)


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(UserError, match="not found"):
        read_table(tmp_path / "none.csv")
    with pytest.raises(UserError, match="is a folder"):
        read_table(tmp_path)


def test_output_dir_moves_files_only_on_success(tmp_path):
    out = tmp_path / "results" / "stage"
    with output_dir(out) as tmp:
        (tmp / "a.csv").write_text("x\n")
    assert (out / "a.csv").read_text() == "x\n"
    # A failing run leaves the previous output and no temporary folder.
    with pytest.raises(RuntimeError):
        with output_dir(out) as tmp:
            (tmp / "a.csv").write_text("half written\n")
            raise RuntimeError("boom")
    assert (out / "a.csv").read_text() == "x\n"
    assert [p.name for p in out.parent.iterdir()] == ["stage"]


def test_output_dir_keeps_files_it_did_not_write(tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    with output_dir(out) as tmp:
        (tmp / "new.csv").write_text("1\n")
    assert (out / "notes.txt").read_text() == "keep me"
    assert (out / "new.csv").exists()


def test_fast_and_rowwise_readers_agree(tmp_path):
    # The same table read through pandas' C parser (plain text) and through the row-wise csv
    # reader (a quoted cell forces it) gives the same strings and line numbers.
    plain = tmp_path / "plain.csv"
    plain.write_text("id,sire,dam\n 007 ,A1,\nb,0,NA\r\nc,b,007\n")
    quoted = tmp_path / "quoted.csv"
    quoted.write_text('id,sire,dam\n 007 ,A1,\nb,0,NA\r\n"c",b,007\n')
    a, b = read_table(plain), read_table(quoted)
    assert a.to_dict("list") == b.to_dict("list")
    assert list(a.index) == list(b.index) == [2, 3, 4]
    assert a.loc[2, "id"] == " 007 "  # white space is the pedigree stage's to strip and log
