"""The ``ped2g pedigree`` command: outputs on success; one line, status 2 and no output on refusal."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.io

from ped2g.cli import main
from ped2g.pedigree.core import Pedigree
from pedigree_oracles import tabular_relationship

DATA = Path(__file__).resolve().parents[1] / "data"


def run(capsys, *argv):
    status = main(["pedigree", *map(str, argv)])
    return status, capsys.readouterr()


def test_outputs_of_a_messy_table(tmp_path, capsys):
    out = tmp_path / "results" / "pedigree"
    status, _ = run(capsys, DATA / "pedigree_messy.tsv", "--out", out, "--id", "animal",
                    "--sire", "father", "--dam", "mother")
    assert status == 0
    assert sorted(p.name for p in out.iterdir()) == ["changes.csv", "pedigree.csv",
                                                     "relationship_inverse.mtx", "summary.json"]
    ped = Pedigree.read_csv(out / "pedigree.csv")
    header = (out / "pedigree.csv").read_text().splitlines()[0]
    assert header == "id,sire,dam,generation,inbreeding"
    # A-inverse file equals the inverse of the tabular A of the written pedigree
    # (exact identity; tabular method as in Mrode 2014, section 2.2)
    ainv = scipy.io.mmread(out / "relationship_inverse.mtx").toarray()
    a = tabular_relationship(ped.sire, ped.dam)
    np.testing.assert_allclose(ainv @ a, np.eye(ped.n), atol=1e-9)
    np.testing.assert_allclose(ped.inbreeding, np.diag(a) - 1, atol=1e-9)
    changes = pd.read_csv(out / "changes.csv", dtype=str, keep_default_na=False)
    assert list(changes.columns) == ["row", "id", "problem", "action"]
    assert len(changes) == 5
    summary = json.loads((out / "summary.json").read_text())
    assert summary["animals"] == ped.n == 9   # 6 distinct rows + founders 1, 2, x9
    assert summary["changes"] == {"dam has no row of its own": 2, "duplicate row": 1,
                                  "sire has no row of its own": 1,
                                  "white space around the id": 1}
    assert summary["input"]["columns"] == {"id": "animal", "sire": "father", "dam": "mother"}
    assert summary["input"]["rows"] == 7   # data lines in the fixture
    assert not [p for p in out.parent.iterdir() if p.name.startswith(".")]


def test_excel_input(tmp_path, capsys):
    raw = tmp_path / "ped.xlsx"
    pd.DataFrame({"id": ["01", "02", "03"], "sire": ["", "", "01"],
                  "dam": ["", "", "02"]}).to_excel(raw, index=False)
    status, _ = run(capsys, raw, "--out", tmp_path / "out")
    assert status == 0
    ped = Pedigree.read_csv(tmp_path / "out" / "pedigree.csv")
    assert list(ped.ids) == ["01", "02", "03"]


def test_help_explains_every_option(capsys):
    with pytest.raises(SystemExit) as info:
        main(["pedigree", "--help"])
    assert info.value.code == 0
    text = capsys.readouterr().out
    for option in ("RAW", "--out", "--id", "--sire", "--dam", "--missing", "--hermaphrodite"):
        assert option in text


REFUSALS = {
    "conflict": ("id,sire,dam\na,,\nb,a,\nb,,a\n", [],
                 r"animal 'b' appears on line 3 .* and line 4 .* with different parents"),
    "own parent": ("id,sire,dam\na,,\nb,b,a\n", [], r"line 3: animal 'b' is listed as its own sire"),
    "cycle": ("id,sire,dam\nx,z,\ny,x,\nz,y,\n", [],
              r"animal 'x' is its own ancestor: 'x' \(line 2\) <- 'z' \(line 4\) <- 'y' "
              r"\(line 3\) <- 'x' \(line 2\)"),
    "both sexes": ("id,sire,dam\np,,\nq,,\nc,p,q\nd,q,p\n", [],
                   r"'p' is the sire of 'c' \(line 4\) and the dam of 'd' \(line 5\)"),
    "selfing": ("id,sire,dam\np,,\nc,p,p\n", [], r"line 3: animal 'c' has 'p' as both sire and dam"),
    "missing id column": ("animal,sire,dam\na,,\n", [], r"has no id column 'id'"),
    "ragged": ("id,sire,dam\na,,\nb,a\n", [], r"line 3 has 2 fields but the header has 3"),
    "header only": ("id,sire,dam\n", [], r"has a header but no data rows"),
    "blank id": ("id,sire,dam\na,,\n,a,\n", [], r"line 3: the id column is blank"),
}


@pytest.mark.parametrize("case", sorted(REFUSALS))
def test_refusal_is_one_line_with_status_2_and_no_output(tmp_path, capsys, case):
    text, extra, match = REFUSALS[case]
    raw = tmp_path / "raw.csv"
    raw.write_text(text, encoding="utf-8")
    _check_refusal(tmp_path, capsys, raw, extra, match)


@pytest.mark.parametrize(("name", "content", "match"), [
    ("empty.csv", b"", r"is empty"),
    ("binary.csv", b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", r"looks like a binary file"),
    ("latin1.csv", "id,sire,dam\nBj\u00f6rn,,\n".encode("latin-1"), r"is not UTF-8 text"),
])
def test_unreadable_files_are_refused(tmp_path, capsys, name, content, match):
    raw = tmp_path / name
    raw.write_bytes(content)
    _check_refusal(tmp_path, capsys, raw, [], match)


def test_missing_file_is_refused(tmp_path, capsys):
    _check_refusal(tmp_path, capsys, tmp_path / "nope.csv", [], r"not found")


def _check_refusal(tmp_path, capsys, raw, extra, match):
    import re

    out = tmp_path / "out"
    status, captured = run(capsys, raw, "--out", out, *extra)
    assert status == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("ped2g pedigree: error: ")
    assert str(raw.name) in lines[0]
    assert re.search(match, lines[0]), lines[0]
    assert "Traceback" not in captured.err
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]


def test_hermaphrodite_option_accepts_selfing(tmp_path, capsys):
    raw = tmp_path / "raw.csv"
    raw.write_text("id,sire,dam\np,,\nc,p,p\n", encoding="utf-8")
    status, _ = run(capsys, raw, "--out", tmp_path / "out", "--hermaphrodite")
    assert status == 0
    ped = Pedigree.read_csv(tmp_path / "out" / "pedigree.csv")
    # selfing of a non-inbred parent: F = 1/2; A-inverse [[3, -2], [-2, 2]] (derived by hand)
    assert ped.inbreeding.tolist() == [0.0, 0.5]
    ainv = scipy.io.mmread(tmp_path / "out" / "relationship_inverse.mtx").toarray()
    np.testing.assert_allclose(ainv, [[3, -2], [-2, 2]], atol=1e-12)


def test_missing_option_sets_the_unknown_parent_codes(tmp_path, capsys):
    raw = tmp_path / "raw.csv"
    raw.write_text("id,sire,dam\na,unk,\nb,a,0\n", encoding="utf-8")
    status, _ = run(capsys, raw, "--out", tmp_path / "out", "--missing", "unk")
    assert status == 0
    table = pd.read_csv(tmp_path / "out" / "pedigree.csv", dtype=str, keep_default_na=False)
    # "0" is now an ordinary id: added as a founder
    assert set(table["id"]) == {"a", "b", "0"}
    assert table.set_index("id").loc["a", "sire"] == ""
