"""The options of a run over files (:func:`specpar.batch.stream.estimate_file`) that
are declared here once; ``specpar estimate`` builds its command-line options from
:data:`RUN_OPTIONS` (see ``specpar/cli/estimate.py``)."""
from __future__ import annotations

from ..core.options import Option, OptionSet, positive

__all__ = ["RUN_OPTIONS"]

#: Options of a run over files (the block and engine options not listed here are
#: still the command's own arguments).
RUN_OPTIONS = OptionSet(
    Option("time_limit", None,
           "dask: stop the run with an error, writing no output, when it has not finished "
           "after SECONDS (default: no limit; a lost scheduler or a cluster without workers "
           "stops the run anyway)",
           unit="s", check=positive, metavar="SECONDS", show_default=False),
)
