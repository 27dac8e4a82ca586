"""Speed and scale: the per-observable-set solver, streaming, Parquet datasets
and the Dask engine.

The rows here are invented (specpar.batch.bench.synthetic_mixed: the shipped
calibration plus a random distance, reddening and noise). They prove the
machinery (same answers however the rows are split, grouped or distributed),
not the science: the published checks live in test_reference.py and
test_roundtrip.py.
"""
from __future__ import annotations

import os
import signal
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from specpar import estimate
from specpar.batch.bench import synthetic_mixed
from specpar.batch.stream import estimate_file
from specpar.cli.main import main
from specpar.core.bands import BANDS, chain_matrices
from specpar.core.solver import Observables, solve

SAMPLE = Path(__file__).resolve().parents[2] / "samples" / "survey.csv"
_P, _ = chain_matrices()


def _padded_reference(obs, absmag, modes, var_mv, var_colour, R, dR, sigma_rv):
    """The previous formulation, kept here as the reference: every star solved at
    the file's full width, unused observables padded with an identity block, and
    a second full solve with the R_V term (generalised least squares, common practice)."""
    N, K = obs.y.shape
    L = obs.L
    uncal = (~np.isfinite(absmag)).astype(float) @ (L != 0).T.astype(float) > 0
    valid = np.isfinite(obs.y) & np.isfinite(obs.sigma) & ~uncal
    is_mag = L.sum(axis=1) != 0
    n_mag, n_col = (valid & is_mag).sum(1), (valid & ~is_mag).sum(1)
    ck, mk = (n_mag >= 2) | (n_col >= 1), n_mag >= 1
    ydiff = obs.y - np.nan_to_num(absmag) @ L.T
    A = np.stack([np.broadcast_to(L.sum(1), (N, K)), np.broadcast_to(R @ L.T, (N, K))], axis=-1)
    l1, LP = L.sum(1), L @ _P
    C0 = var_mv[:, None, None] * np.outer(l1, l1)[None] + (var_colour[:, None, :] * LP[None]) @ LP.T
    lm = modes @ L.T
    C0 = C0 + np.swapaxes(lm, 1, 2) @ lm + np.eye(K)[None] * np.nan_to_num(obs.sigma ** 2, nan=1.0)[:, :, None]
    lrv = np.broadcast_to(dR @ L.T, (N, K))

    def gls(C):
        v = valid.astype(float)
        C = C * v[:, :, None] * v[:, None, :] + np.eye(K)[None] * (1 - v)[:, :, None]
        Av, y = A * v[:, :, None], np.where(valid, ydiff, 0.0)
        X = np.linalg.solve(C, np.concatenate([Av, y[:, :, None]], axis=2))
        F = np.einsum("nki,nkj->nij", Av, X[:, :, :2])
        F[:, 1, 1] += np.where(ck, 0, 1e12)
        F[:, 0, 0] += np.where(mk, 0, 1e12)
        F[valid.sum(1) == 0] = np.eye(2)
        b = np.einsum("nki,nk->ni", Av, X[:, :, 2])
        cov = np.linalg.inv(F)
        return np.einsum("nij,nj->ni", cov, b), cov
    theta, cov = gls(C0)
    e = np.clip(theta[:, 1], 0, None)
    theta, cov = gls(C0 + ((e * sigma_rv) ** 2)[:, None, None] * lrv[:, :, None] * lrv[:, None, :])
    return theta, cov, valid, ck, mk


def test_grouped_solver_matches_padded_formulation():
    """Solving each star at its own size changes nothing beyond rounding."""
    from specpar.calib.extinction import band_coefficients, coefficient_derivative
    from specpar.calib.tables import default_calibrations
    from specpar.core.sptype import parse_sptypes
    frame = synthetic_mixed(3000, seed=11)
    names = [b.name for b in BANDS]
    y = frame[names].to_numpy(float)
    sig = frame[[f"e_{n}" for n in names]].to_numpy(float)
    p = parse_sptypes(list(frame["sptype"]))
    cal = default_calibrations().evaluate(p["sptnum"].to_numpy(float), p["lc_bright"].to_numpy(object),
                                          p["lc_faint"].to_numpy(object))
    modes = (np.nan_to_num(cal.dabsmag) * 0.7)[:, None, :]
    obs = Observables(y, sig, np.eye(len(names)))
    R, dR = band_coefficients("F99", 3.1), coefficient_derivative("F99", 3.1)
    ref_theta, ref_cov, valid, ck, mk = _padded_reference(obs, cal.absmag, modes, np.nan_to_num(cal.var_mv),
                                                          np.nan_to_num(cal.var_colour), R, dR, 0.2)
    res = solve(obs, cal.absmag, modes, cal.var_mv, cal.var_colour, R, dR, 0.2, 3.1, keep_weights=True)
    ok = valid.any(axis=1) & mk
    assert ok.sum() > 2000 and len(np.unique(valid, axis=0)) > 100  # many different observable sets
    np.testing.assert_array_equal(res.valid, valid)
    # tolerance: rounding of 1e-10 mag on values of order 1-10 mag (double precision)
    np.testing.assert_allclose(res.dm[ok], ref_theta[ok, 0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(res.ebv[ok & ck], ref_theta[ok & ck, 1], rtol=0, atol=1e-9)
    np.testing.assert_allclose(res.e_dm[ok], np.sqrt(ref_cov[ok, 0, 0]), rtol=1e-9)
    np.testing.assert_allclose(res.e_ebv[ok & ck], np.sqrt(ref_cov[ok & ck, 1, 1]), rtol=1e-9)
    # weights of unused observables: the identity block of the padded solve
    unused = ~valid
    assert np.all(res.weights[:, np.arange(valid.shape[1]), np.arange(valid.shape[1])][unused] == 1.0)


def _whole(path, **kw):
    return estimate(pd.read_parquet(path), **kw)


@pytest.fixture(scope="module")
def mixed_parquet(tmp_path_factory):
    path = tmp_path_factory.mktemp("mixed") / "mixed.parquet"
    synthetic_mixed(2500, seed=3).to_parquet(path, row_group_size=600)
    return path


def _assert_same_frames(a: pd.DataFrame, b: pd.DataFrame):
    assert list(a.columns) == list(b.columns)
    assert len(a) == len(b)
    for c in a.columns:
        x, y = a[c].to_numpy(), b[c].to_numpy()
        if x.dtype.kind == "f":
            np.testing.assert_array_equal(x, y, err_msg=c)  # exact, NaN where NaN
        else:
            assert [str(v) for v in x] == [str(v) for v in y], c


@pytest.mark.parametrize("method", ["analytic", "mc"])
def test_streamed_parquet_equals_whole_table(mixed_parquet, tmp_path, method):
    kw = dict(method=method, n_draws=40, seed=5)
    dst = tmp_path / "out.parquet"
    summary = estimate_file(mixed_parquet, dst, chunk_rows=333, threads=2, **kw)
    got = pd.read_parquet(dst)
    want = _whole(mixed_parquet, **kw)
    _assert_same_frames(got, want)
    assert summary["rows"] == len(want)
    assert [p.name for p in tmp_path.iterdir()] == ["out.parquet"]  # no temporary left
    assert b"specpar" in pq.read_schema(dst).metadata


@pytest.mark.skipif(not SAMPLE.is_file(), reason="samples/survey.csv is not in this checkout")
def test_streamed_csv_equals_whole_table(tmp_path):
    a, b = tmp_path / "blocks.parquet", tmp_path / "whole.parquet"
    estimate_file(SAMPLE, a, chunk_rows=7)
    estimate_file(SAMPLE, b, chunk_rows=0)
    x, y = pd.read_parquet(a), pd.read_parquet(b)
    for c in ("dm", "e_dm", "ebv", "e_ebv", "dist_pc", "flags"):
        np.testing.assert_array_equal(x[c].to_numpy(), y[c].to_numpy(), err_msg=c)
    assert list(x["note"]) == list(y["note"])
    assert list(x["id"]) == list(y["id"])


def _write_dataset(root: Path, frame: pd.DataFrame, per_file=500):
    """A hive-partitioned dataset: field=<name>/part-<k>.parquet."""
    for val in sorted(frame["field"].unique()):
        sub = frame[frame["field"] == val].drop(columns="field").reset_index(drop=True)
        (root / f"field={val}").mkdir(parents=True)
        for k, s in enumerate(range(0, len(sub), per_file)):
            pq.write_table(pa.Table.from_pandas(sub.iloc[s:s + per_file], preserve_index=False),
                           root / f"field={val}" / f"part-{k}.parquet", row_group_size=200)


@pytest.fixture(scope="module")
def dataset(tmp_path_factory):
    root = tmp_path_factory.mktemp("ds") / "catalogue"
    frame = synthetic_mixed(2400, seed=8)
    frame["field"] = np.where(np.arange(len(frame)) % 3 == 0, "Rim", "Core")
    _write_dataset(root, frame)
    return root


def _files(root):
    return sorted(str(p.relative_to(root)) for p in root.rglob("*.parquet"))


def test_dataset_output_mirrors_partitions(dataset, tmp_path):
    dst = tmp_path / "distances"
    estimate_file(dataset, dst, chunk_rows=150)
    assert _files(dst) == _files(dataset)
    for rel in _files(dataset):
        _assert_same_frames(pd.read_parquet(dst / rel), _whole(dataset / rel))
    back = pd.read_parquet(dst)  # hive partitioning read back from the folder names
    assert set(back["field"].astype(str)) == {"Rim", "Core"}
    assert [p.name for p in tmp_path.iterdir()] == ["distances"]


def test_dataset_output_needs_overwrite(dataset, tmp_path):
    dst = tmp_path / "distances"
    dst.mkdir()
    with pytest.raises(ValueError, match="exists"):
        estimate_file(dataset, dst)
    with pytest.raises(ValueError, match="input"):
        estimate_file(dataset, dataset / "inside", overwrite=True)


def test_too_many_draws_is_one_clear_line(capsys, mixed_parquet, tmp_path):
    dst = tmp_path / "never.parquet"
    code = main(["estimate", str(mixed_parquet), "-o", str(dst), "--mc", str(10 ** 9), "--quiet"])
    err = capsys.readouterr().err
    assert code == 1
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert "draws" in err and "fewer" in err
    assert not dst.exists() and list(tmp_path.iterdir()) == []


def test_bench_mixed_runs(tmp_path):
    from specpar.batch.bench import run_benchmark
    fig = run_benchmark(n_rows=3000, n_loop=200, workdir=tmp_path, mixed=True)
    assert fig["rows"] == 3000 and fig["rows_per_s"] > 0 and fig["loop_rows_per_s"] > 0
    assert 2.5 < fig["bands_per_star"] < 3.7  # the mix: 3.1 bands per star on average


# ----------------------------------------------------------------------------- Dask



@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as c:
        yield c


@pytest.mark.parametrize("method", ["analytic", "mc"])
def test_dask_cluster_equals_single_process(cluster, dataset, tmp_path, method):
    kw = dict(method=method, n_draws=30, seed=9)
    one, many = tmp_path / "one", tmp_path / "many"
    estimate_file(dataset, one, chunk_rows=250, **kw)
    estimate_file(dataset, many, engine="dask", scheduler=cluster.scheduler_address, chunk_rows=250, **kw)
    assert _files(one) == _files(many)
    for rel in _files(one):
        _assert_same_frames(pd.read_parquet(many / rel), pd.read_parquet(one / rel))
        assert pq.read_schema(many / rel).metadata[b"specpar"] == pq.read_schema(one / rel).metadata[b"specpar"]


def test_dask_single_file_joined_in_order(cluster, mixed_parquet, tmp_path):
    dst = tmp_path / "out.parquet"
    estimate_file(mixed_parquet, dst, engine="dask", scheduler=cluster.scheduler_address, chunk_rows=500)
    _assert_same_frames(pd.read_parquet(dst), _whole(mixed_parquet))
    assert [p.name for p in tmp_path.iterdir()] == ["out.parquet"]


def test_dask_dataframe_entry_point(cluster):
    dd = pytest.importorskip("dask.dataframe")
    from distributed import Client

    from specpar.batch.daskrun import estimate_dask
    frame = synthetic_mixed(900, seed=21)
    with Client(cluster.scheduler_address):
        got = estimate_dask(dd.from_pandas(frame, npartitions=4), method="mc", n_draws=25, seed=4).compute()
    _assert_same_frames(got.reset_index(drop=True), estimate(frame, method="mc", n_draws=25, seed=4))


def test_dask_failing_partition_leaves_no_output(cluster, dataset, tmp_path):
    import shutil
    src = tmp_path / "src"
    shutil.copytree(dataset, src)
    (src / "field=Rim" / "part-1.parquet").write_bytes(b"PAR1 not really parquet")
    dst = tmp_path / "out"
    with pytest.raises(ValueError, match=r"field=Rim/part-1.parquet failed 2 times"):
        estimate_file(src, dst, engine="dask", scheduler=cluster.scheduler_address)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["src"]  # no output, no temporary folder


#: Seconds the killed-worker run may take before its own time limit stops it (our
#: choice: the run takes about 10 s on a quiet 2-core machine).
KILL_RUN_LIMIT_S = 120


def test_dask_worker_killed_mid_run_is_retried(cluster, dataset, tmp_path):
    """A worker process killed while solving: the piece runs again elsewhere and the
    output equals the single-process run. The run has a time limit, so it ends
    whatever the machine's load does to the cluster; a stop must be one clean
    error with no output."""
    from distributed import Client

    from specpar.core.errors import InputError
    one, many = tmp_path / "one", tmp_path / "many"
    estimate_file(dataset, one, chunk_rows=100, method="mc", n_draws=300)
    result = {}

    def run():
        try:
            result["summary"] = estimate_file(dataset, many, engine="dask", scheduler=cluster.scheduler_address,
                                              chunk_rows=100, method="mc", n_draws=300,
                                              time_limit=KILL_RUN_LIMIT_S)
        except Exception as exc:  # reported below
            result["error"] = exc
    t = threading.Thread(target=run)
    t.start()
    with Client(cluster.scheduler_address) as client:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not any(client.processing().values()):
            time.sleep(0.05)
        busy = [w for w, tasks in client.processing().items() if tasks]
        if busy:
            pid = client.run(os.getpid, workers=busy[:1])[busy[0]]
            os.kill(pid, signal.SIGKILL)
    t.join(KILL_RUN_LIMIT_S + 60)  # the run's own limit, plus closing the client
    assert not t.is_alive()
    if not busy:
        pytest.skip("the run ended before a worker could be killed")
    if "error" in result:  # a clean, named failure is acceptable too, but never a partial output
        err = result["error"]
        assert isinstance(err, InputError) and len(str(err).splitlines()) == 1, repr(err)
        assert "no output written" in str(err) and not many.exists()
        return
    assert _files(one) == _files(many)
    for rel in _files(one):
        _assert_same_frames(pd.read_parquet(many / rel), pd.read_parquet(one / rel))


def test_local_cluster_workers_keep_the_allocator_defaults(monkeypatch):
    """Dask's default MALLOC_TRIM_THRESHOLD_ in its workers stops glibc from adapting
    its mmap threshold (glibc mallopt(3): setting a threshold disables the dynamic
    one), and every large numpy temporary became a fresh mapping: 19 s of system
    time against 3.8 s in one process on 4M rows. A cluster specpar starts keeps the
    defaults a single process has."""
    pytest.importorskip("distributed")
    import os

    from specpar.batch.daskrun import _close, connect
    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)  # a cluster started earlier sets it here
    client, cluster = connect(workers=1)
    try:
        seen = client.run(os.environ.get, "MALLOC_TRIM_THRESHOLD_")
        assert list(seen.values()) == [None]
    finally:
        _close(client, cluster)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc/self/status")
def test_dataset_benchmark_reports_the_childs_own_peak(tmp_path):
    """The peak memory is the child's own (VmHWM), not this process's high-water mark,
    which ru_maxrss carries across fork and exec: holding 600 MB here must not show."""
    from specpar.batch.bench import run_dataset_benchmark
    ballast = np.ones(75_000_000)  # 600 MB resident in this process
    fig = run_dataset_benchmark(n_rows=20_000, workdir=tmp_path, rows_per_file=10_000)
    del ballast
    assert fig["peak_rss_known"] and 50 < fig["peak_rss_mb"] < 550, fig
