"""A file system that refuses to write (here: /proc, where no file can be created) gives one
line on stderr and exit status 1, for every command that writes files (common practice for
command-line tools: the user can mend it by choosing another place)."""
from __future__ import annotations

import sys
from pathlib import Path

import pytest

from specpar.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "samples"
pytestmark = pytest.mark.skipif(not (sys.platform.startswith("linux") and Path("/proc/self").exists()),
                                reason="needs Linux /proc as a folder that refuses new files")


@pytest.mark.parametrize("args", [
    ["estimate", str(SAMPLES / "survey.csv"), "-o", "/proc/specpar-test.csv"],
    ["estimate", str(SAMPLES / "survey.csv"), "-o", "/proc/specpar-test.parquet"],
    ["cluster", str(SAMPLES / "cluster_field.csv"), "-o", "/proc/specpar-test.ecsv"],
    ["worked", str(SAMPLES / "survey.csv"), "-o", "/proc/specpar-test.md"],
    ["problems", "--out-dir", "/proc/specpar-test", "--seed", str(2 ** 100)],
])
def test_refused_write_is_one_line(args, capsys):
    code = main(args + ["--quiet"] if args[0] in ("estimate", "cluster", "problems") else args)
    err = capsys.readouterr().err
    assert code == 1 and err.count("\n") == 1 and "/proc/specpar-test" in err and "Traceback" not in err
