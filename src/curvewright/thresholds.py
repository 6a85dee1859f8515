"""The shared alarm levels and the research-use caution: one home, read by every layer.

The fitting core (its diagnostics), the result (its tables and text), the statistics (their
warnings) and the widget all judge a fit by these numbers and print this caution, so each is
defined once here. The module imports nothing of ours (it is the bottom layer).
"""

from __future__ import annotations

__all__ = [
    "CAUTION",
    "CLEARLY_LOWER",
    "DEGENERATE_CORRELATION",
    "DEGENERATE_SE",
    "HIGH_CORRELATION",
    "NEAR_SINGULAR",
    "NOT_IDENTIFIED_RSE",
    "RUNAWAY",
    "THIN_SUPPORT",
]

#: The caution printed with every summary (and shown by the widget).
CAUTION = (
    "Statistical estimates for research use. Validate under your lab's QA and local "
    "regulations; not for clinical or dosing decisions."
)

#: |correlation| above which two parameters are reported as not separately determined (common
#: practice: 0.99 is the usual alarm level).
HIGH_CORRELATION = 0.99

#: A free parameter whose standard error exceeds this multiple of its absolute value is reported
#: as "not identified": its asymptotic 95% interval spans zero and about twice its own size in
#: each direction, so the data say little more than its sign, if that.
NOT_IDENTIFIED_RSE = 1.0

#: A column-scaled Jacobian with a condition number above this has a near-singular covariance.
NEAR_SINGULAR = 1e10

#: |correlation| above which a fit's stopping point is suspect: the global search is run, and
#: the point is kept unless the search finds a clearly lower minimum (ill-conditioned problems
#: such as sums of exponentials reach |r| = 0.9999 and more at their true minimum, so this alone
#: never fails a fit).
DEGENERATE_CORRELATION = 0.9999

#: A standard error above this multiple of the parameter's size (its absolute value or, when
#: larger, the typical size the data suggest for it) marks a degenerate point: the data do not
#: determine the parameter at all (a rate run off where the curve no longer depends on it).
#: Ordinary "not identified" parameters (standard error about their value) stay a warning.
DEGENERATE_SE = 1e3

#: A parameter beyond this multiple of the largest size the data make plausible for it has run
#: away (a rate or width heading for infinity or a midpoint far outside the data).
RUNAWAY = 1e6

#: Relative reduction of the objective by which a minimum found by the global search counts as
#: clearly lower than the one the user's start reached (smaller differences are the same
#: minimum, reached to the solver's precision, and the user's point is kept).
CLEARLY_LOWER = 1e-6

#: A free parameter whose sensitivity (its column of the weighted Jacobian) is carried by fewer
#: than this many points' worth of data (the participation ratio ``(sum J**2)**2 / sum J**4``:
#: 1 when one point carries it all, n when all n carry it alike) sits on a feature of the curve
#: narrower than the data's spacing: a peak or step between or on one or two points. Such a
#: start or stopping point is suspect and the global search is run. Our judgement: a feature
#: seen by fewer than about one and a half points cannot be told from a spike or a step, and a
#: fit that started there has seen nothing of the data's shape.
THIN_SUPPORT = 1.5
