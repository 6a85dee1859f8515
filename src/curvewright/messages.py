"""The one table that turns a solver's stopping condition into a plain message.

Every way a fit can end has a short ``code`` (stable, used in JSON and by the widget) and a
sentence a lab scientist understands. The raw codes of the two solvers behind lmfit, MINPACK's
``ier`` (``scipy.optimize.leastsq``) and ``status`` (``scipy.optimize.least_squares``), map into
this table; nothing else in curvewright words a solver outcome.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

__all__ = [
    "LEASTSQ_IER",
    "LEAST_SQUARES_STATUS",
    "OUTCOMES",
    "Outcome",
    "outcome",
]


@dataclass(frozen=True)
class Outcome:
    """How a fit ended.

    Attributes
    ----------
    code : str
        Stable identifier, e.g. ``"converged_ssr"`` or ``"stopped_time"``.
    success : bool
        Whether this ending counts as converged.
    text : str
        The plain message shown to the user.
    """

    code: str
    success: bool
    text: str


_ROWS: tuple[Outcome, ...] = (
    Outcome("linear", True, "solved directly by linear least squares (no iteration needed)"),
    Outcome(
        "converged_ssr",
        True,
        "converged: the sum of squares stopped decreasing (relative change below tolerance)",
    ),
    Outcome(
        "converged_step",
        True,
        "converged: the parameters stopped changing (relative step below tolerance)",
    ),
    Outcome(
        "converged_both",
        True,
        "converged: both the sum of squares and the parameters stopped changing",
    ),
    Outcome(
        "converged_gradient",
        True,
        "converged: the residuals are orthogonal to every direction the parameters can move "
        "(gradient below tolerance)",
    ),
    Outcome(
        "converged_precision",
        True,
        "converged to the limit of double precision: no further reduction is possible",
    ),
    Outcome(
        "nothing_to_fit",
        True,
        "nothing to fit: every parameter is fixed or linked, so the curve was evaluated as given",
    ),
    Outcome(
        "stopped_evaluations",
        False,
        "stopped: evaluation limit reached before convergence; raise max_evaluations or give "
        "better starting values",
    ),
    Outcome(
        "stopped_time",
        False,
        "stopped: time limit reached before convergence; raise timeout or give better "
        "starting values",
    ),
    Outcome("cancelled", False, "cancelled"),
    Outcome(
        "solver_input",
        False,
        "the solver rejected its input (too few points or an invalid tolerance)",
    ),
    Outcome(
        "not_finite",
        False,
        "stopped: the model gave NaN or infinite values during the fit; check the starting "
        "values and the bounds",
    ),
    Outcome("not_converged", False, "the solver stopped without meeting a convergence test"),
    Outcome(
        "degenerate_stop",
        False,
        "stopped at a degenerate point: the solver's stopping test was met, but there the data "
        "do not determine the parameters (see the notes); the numbers are not estimates, and "
        "the global search found no better point",
    ),
)

#: Every outcome by code, read-only.
OUTCOMES: Mapping[str, Outcome] = MappingProxyType({row.code: row for row in _ROWS})

#: ``scipy.optimize.leastsq`` (MINPACK lmdif/lmder) ``ier`` -> our code. 6, 7 and 8 say a
#: tolerance was too small for any further progress in double precision: with our deliberately
#: tight tolerances that is how a fit at the true minimum usually ends, so they count as converged.
LEASTSQ_IER: Mapping[int, str] = MappingProxyType(
    {
        0: "solver_input",
        1: "converged_ssr",
        2: "converged_step",
        3: "converged_both",
        4: "converged_gradient",
        5: "stopped_evaluations",
        6: "converged_precision",
        7: "converged_precision",
        8: "converged_precision",
    }
)

#: ``scipy.optimize.least_squares`` ``status`` -> our code.
LEAST_SQUARES_STATUS: Mapping[int, str] = MappingProxyType(
    {
        -1: "solver_input",
        0: "stopped_evaluations",
        1: "converged_gradient",
        2: "converged_ssr",
        3: "converged_step",
        4: "converged_both",
    }
)


def outcome(code: str) -> Outcome:
    """The table row for ``code`` (unknown codes read as "not converged").

    Parameters
    ----------
    code : str
        A key of :data:`OUTCOMES`.

    Returns
    -------
    Outcome
    """
    return OUTCOMES.get(code, OUTCOMES["not_converged"])
