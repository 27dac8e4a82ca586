"""Seeds of problem sets (specpar.teaching.seeds): the sheet gives nothing of the generator away,
key stretching, the default seed's entropy and the small-seed warning."""
from __future__ import annotations

import numpy as np
import pytest

from specpar.cli.main import main
from specpar.teaching import make_problem_set, write_problem_set

from teaching_cases import problem_files_bytes

# the tests below pick small seeds on purpose (readable, reproducible); the warning has its own test
pytestmark = pytest.mark.filterwarnings("ignore::specpar.teaching.SmallSeedWarning")


# ----------------------------------------------------------------------------- the sheet must not give the key away

def _old_style_label(seed):
    """The label a student could rebuild from the generator's first draws (what the sheet must not carry)."""
    rng = np.random.default_rng(seed)
    return "LAB-" + "".join(chr(65 + k) for k in rng.integers(0, 26, 4))


def test_label_is_not_a_draw_of_the_generator():
    labels = [make_problem_set(seed=s, n_stars=1, level="simple").label for s in range(12)]
    assert all(lab != _old_style_label(s) for s, lab in enumerate(labels))
    assert len(set(labels)) >= 11  # still a per-seed name (4 letters: collisions are rare)


def test_each_seed_a_student_tries_costs_key_stretching():
    """PBKDF2 (RFC 8018) between seed and generator: trying seeds is no longer a fraction of a second
    for thousands of them (the old label fell to a search over 10^5 seeds in well under a second)."""
    import time
    from specpar.teaching import KDF_ITERATIONS, derive_seed
    assert KDF_ITERATIONS >= 100_000
    t0 = time.perf_counter()
    for s in range(5):
        derive_seed(s)
    assert (time.perf_counter() - t0) / 5 > 0.005  # seconds per seed tried; about 0.06 s here


def test_default_seed_has_enough_entropy_and_is_written_to_the_key_only(tmp_path):
    import warnings
    from specpar.teaching import SEED_BITS
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no small-seed warning for a drawn seed
        a = make_problem_set(n_stars=3)
        b = make_problem_set(n_stars=3)
    assert a.settings["seed"] != b.settings["seed"] and list(a.sheet["V"]) != list(b.sheet["V"])
    assert a.settings["seed"].bit_length() > SEED_BITS - 30  # 128 random bits (fewer with probability 2^-30)
    files = write_problem_set(a, tmp_path)
    seed = str(a.settings["seed"])
    for role in ("sheet_csv", "sheet_md", "sheet_html"):
        assert seed not in files[role].read_text()
    for role in ("key_md", "key_html"):
        assert seed in files[role].read_text()
    # the recorded seed makes the same set again, byte for byte
    again = problem_files_bytes(make_problem_set(seed=a.settings["seed"], n_stars=3), tmp_path / "again")
    assert again == {r: p.read_bytes() for r, p in files.items()}


def test_small_hand_picked_seed_warns(tmp_path, capsys):
    from specpar.teaching import SmallSeedWarning
    with pytest.warns(SmallSeedWarning, match=r"seed 1234 has only 11 bits"):
        make_problem_set(seed=1234, n_stars=2)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        make_problem_set(seed=2 ** 64 + 1234, n_stars=2)
    assert main(["problems", "--seed", "1234", "--n", "2", "--out-dir", str(tmp_path / "w")]) == 0
    err = capsys.readouterr().err
    assert err.startswith("specpar: warning: seed 1234") and err.count("\n") == 1
    assert main(["problems", "--n", "2", "--out-dir", str(tmp_path / "x")]) == 0  # no --seed: drawn
    assert capsys.readouterr().err == ""
