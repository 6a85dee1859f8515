"""The shared alarm levels and the research-use caution: one home, read by every layer.

The fitting core (its diagnostics), the result (its tables and text), the statistics (their
warnings) and the widget all judge a fit by these numbers and print this caution, so each is
defined once here. The module imports nothing of ours (it is the bottom layer).
"""

from __future__ import annotations

__all__ = ["CAUTION", "HIGH_CORRELATION", "NEAR_SINGULAR", "NOT_IDENTIFIED_RSE"]

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
