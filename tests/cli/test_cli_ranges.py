"""Range options are written the same way in every command: ``LO HI`` or ``LO,HI``
(issue: one architecture; `--dm-range LO,HI` and `--dist-range LO HI` used to differ)."""
from __future__ import annotations

from pathlib import Path

import pytest

from specpar.cli import main
from specpar.core.errors import InputError
from specpar.core.options import parse_range

SAMPLES = Path(__file__).resolve().parents[2] / "samples"


@pytest.mark.parametrize("value", [(1, 2), "1,2", ["1,2"], ["1", "2"], [" 1", "2 "]])
def test_parse_range_forms(value):
    assert parse_range(value) == (1.0, 2.0)


@pytest.mark.parametrize("value", ["1", "a,b", ["1", "2", "3"], (2, 1), ("nan", 1)])
def test_parse_range_refuses(value):
    with pytest.raises(InputError):
        parse_range(value, "--x-range")


def test_cluster_ranges_both_forms_same_fit(tmp_path, capsys):
    outs = []
    for i, form in enumerate((["--dm-range", "5", "12", "--ebv-range", "0", "1"],
                              ["--dm-range=5,12", "--ebv-range=0,1"])):
        out = tmp_path / f"m{i}.ecsv"
        assert main(["cluster", str(SAMPLES / "cluster_field.csv"), "-o", str(out), "--quiet", *form]) == 0
        outs.append(out.read_bytes())
    assert outs[0] == outs[1]


def test_problem_ranges_both_forms_same_set(tmp_path, capsys):
    files = []
    for i, form in enumerate((["--dist-range", "50", "500", "--ebv-range", "0.1", "0.4"],
                              ["--dist-range", "50,500", "--ebv-range", "0.1,0.4"])):
        folder = tmp_path / f"p{i}"
        assert main(["problems", "--seed", str(2 ** 100 + 7), "--out-dir", str(folder), "--quiet", *form]) == 0
        files.append({p.name: p.read_bytes() for p in sorted(folder.iterdir())})
    assert files[0] == files[1]


def test_reversed_range_is_one_line_error(tmp_path, capsys):
    code = main(["problems", "--seed", str(2 ** 100), "--out-dir", str(tmp_path / "p"), "--dist-range", "500", "50"])
    err = capsys.readouterr().err
    assert code == 1 and err.count("\n") == 1 and "--dist-range" in err
