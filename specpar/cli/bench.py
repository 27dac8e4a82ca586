"""``specpar bench``: time estimate on synthetic rows (Parquet in and out)."""
from __future__ import annotations

__all__ = ["register"]


def run(args) -> int:
    from specpar.batch.bench import run_benchmark, run_dataset_benchmark
    if args.dataset:
        run_dataset_benchmark(n_rows=args.rows, workdir=args.workdir)
    else:
        run_benchmark(n_rows=args.rows, n_loop=args.loop_rows, workdir=args.workdir, mixed=args.mixed,
                      threads=args.threads)
    return 0


def register(sub) -> None:
    p = sub.add_parser("bench", help="time estimate on synthetic rows (Parquet in and out)")
    p.add_argument("--rows", type=int, default=1_000_000, help="rows for the vectorised run (default 1e6)")
    p.add_argument("--loop-rows", type=int, default=20_000,
                   help="rows for the plain per-row Python comparison (default 20000)")
    p.add_argument("--workdir", default=None, help="folder for the Parquet files (default: a temporary one)")
    p.add_argument("--mixed", action="store_true",
                   help="realistic mix: 11 bands, 3.1 per star on average (default: B and V only)")
    p.add_argument("--threads", type=int, default=None, help="blocks solved at once (default as for estimate)")
    p.add_argument("--dataset", action="store_true",
                   help="write --rows mixed rows as a Parquet dataset and time 'specpar estimate' on it "
                        "in a child process, reporting rows/s and peak memory")
    p.set_defaults(func=run)
