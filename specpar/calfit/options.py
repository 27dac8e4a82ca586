"""The options of :func:`specpar.calibrate` and ``specpar calibrate``, each declared once.

:data:`CALIBRATE_OPTIONS` holds the Python API (defaults, documentation);
:data:`CLI_OPTIONS` the command-line options in the order of the help text. The
two share the same :class:`~specpar.core.options.Option` objects; the command
line gives the space density as two flags (``--scale-height``,
``--uniform-density``) that :func:`api_options` turns into ``scale_height_pc``.
"""
from __future__ import annotations

from specpar.core.options import Option, OptionSet

__all__ = ["CALIBRATE_OPTIONS", "CLI_OPTIONS", "api_options"]

CLASSES = Option("classes", None, "luminosity class to fit (repeatable; default all with enough stars)",
                 kind=list, flag="--class", metavar="LC")
COLUMNS = Option("columns", None, "map one of our column names to yours", kind=list, flag="--col",
                 metavar="OURS=YOURS")
RV = Option("rv", 3.1, "A_V/E(B-V) for the calibrators")
SCALE_HEIGHT_PC = Option(
    "scale_height_pc", "auto", "space density: 'auto' (disk, scale heights by type and class, "
    "default_scale_height), a disk scale height in pc for all types, or None (uniform); uniform "
    "without a glat column", kind=object, flag="")
V_LIMIT = Option("v_limit", None, "use only stars with V at most this", unit="mag")
MIN_STARS = Option("min_stars", 30, "fewest stars to fit a class", kind=int)
MIN_PER_NODE = Option("min_per_node", 8, "fewest stars within 1.5 subtypes for a type to be tabulated",
                      kind=int)
SMOOTH_MV = Option("smooth_mv", 0.15, "width of the curvature prior on M_V (mag per subtype^2; "
                   "see fit_luminosity)", flag="")
SMOOTH_LOGSIG = Option("smooth_logsig", 0.1, "width of the curvature prior on log scatter "
                       "(per subtype^2; see fit_luminosity)", flag="")
SAMPLE = Option("sample", "", "description of the sample, written into the tables", kind=str,
                show_default=False)
BASE_CALIBRATIONS = Option("base_calibrations", (), "calibration files that supply intrinsic colours "
                           "where too few nearby stars fit them (default: the shipped tables)",
                           kind=tuple, flag="")
N_JOBS = Option("n_jobs", 2, "classes fitted in parallel threads (the result does not depend on it)",
                kind=int, flag="")

#: Command line only: the two spellings of the space density.
SCALE_HEIGHT = Option("scale_height", None, "one disk scale height for all types (default: by type and class)",
                      unit="pc", flag="--scale-height", metavar="PC")
UNIFORM_DENSITY = Option("uniform_density", False, "uniform space density instead of a disk", kind=bool)

CALIBRATE_OPTIONS = OptionSet(CLASSES, COLUMNS, RV, SCALE_HEIGHT_PC, V_LIMIT, MIN_STARS, MIN_PER_NODE,
                              SMOOTH_MV, SMOOTH_LOGSIG, SAMPLE, BASE_CALIBRATIONS, N_JOBS)
CLI_OPTIONS = OptionSet(COLUMNS, CLASSES, RV, SCALE_HEIGHT, UNIFORM_DENSITY, V_LIMIT, MIN_STARS,
                        MIN_PER_NODE, SAMPLE)


def api_options(cli_values: dict) -> dict:
    """Keyword arguments of :func:`specpar.calibrate` from the values of :data:`CLI_OPTIONS`
    (``--col`` pairs become the ``columns`` mapping)."""
    from specpar.io.columns import column_map
    out = {k: v for k, v in cli_values.items() if k in CALIBRATE_OPTIONS.names()}
    out["columns"] = column_map(cli_values.get("columns"))
    uniform, height = cli_values.get("uniform_density"), cli_values.get("scale_height")
    out["scale_height_pc"] = None if uniform else ("auto" if height is None else height)
    return out
