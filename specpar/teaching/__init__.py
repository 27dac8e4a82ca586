"""Teaching: worked solutions (answer keys) of a table of stars, and invented problem sets with a
student sheet and the matching key.

Modules, bottom first: ``numbers`` (display rounding, markup), ``model`` (step objects),
``equations`` (a step written out), ``context`` (what the step builders read), ``steps`` and
``modulus`` (the step builders), ``solutions`` (:func:`worked_solutions`, :func:`answer_key`),
``keytext``/``render_md``/``render_html`` (renderers), ``output`` (writing files), ``options``
(option declarations), ``seeds``/``levels``/``draw``/``problems``/``sheets`` (problem sets).
"""
from .model import FitRow, Step, SummaryTable, WorkedSolution, WorkedStar
from .numbers import evaluate_display, fmt, fmt_error
from .equations import equation
from .solutions import answer_key, worked_solutions
from .render_md import render_markdown
from .render_html import render_html
from .output import write_text, write_worked
from .options import DEFAULT_DECIMALS, DOCUMENT_FORMATS
from .seeds import SEED_BITS, SMALL_SEED_BITS, KDF_ITERATIONS, SmallSeedWarning, derive_seed
from .levels import LEVELS, MAX_STARS
from .problems import ProblemSet, make_problem_set
from .sheets import problem_files, write_problem_set

__all__ = ["Step", "FitRow", "WorkedStar", "WorkedSolution", "SummaryTable", "worked_solutions", "answer_key",
           "render_markdown", "render_html", "write_text", "write_worked", "evaluate_display", "fmt", "fmt_error",
           "equation", "DEFAULT_DECIMALS", "DOCUMENT_FORMATS", "SEED_BITS", "SMALL_SEED_BITS", "KDF_ITERATIONS",
           "SmallSeedWarning", "derive_seed", "LEVELS", "MAX_STARS", "ProblemSet", "make_problem_set",
           "problem_files", "write_problem_set"]
