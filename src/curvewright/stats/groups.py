"""Questions about the groups of a global fit: do they differ in a parameter; which pairs do.

* :func:`shared_or_separate` refits the model with the parameter shared and per group and compares
  the two fits by the extra-sum-of-squares F test and AICc (common practice for "is one value
  enough for all groups?"; the F test is exact for linear models with normal errors,
  approximate otherwise).
* :func:`compare_groups` tests every pair of groups for a difference in a per-group parameter
  by a Wald t test from the joint covariance (``var(a - b) = C_aa + C_bb - 2 C_ab``, t on the
  fit's residual degrees of freedom), with a multiplicity correction (Holm's step-down method
  by default; Bonferroni or none on request).
* :func:`compare_global` is :func:`curvewright.compare` for global fits.
"""

from __future__ import annotations

import html
import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from curvewright.errors import ParameterError
from curvewright.global_result import GlobalResult
from curvewright.inference import parameter_tests, quantile
from curvewright.result import register_statistics
from curvewright.stats.compare import (
    Comparison,
    compare_global,
)
from curvewright.thresholds import CAUTION as _CAUTION

__all__ = [
    "GroupComparison",
    "SharedTest",
    "adjust_p",
    "compare_global",
    "compare_groups",
    "shared_or_separate",
]

_CORRECTIONS = ("holm", "bonferroni", "none")


# ------------------------------------------------------------------------ multiplicity
def adjust_p(p: Sequence[float], method: str = "holm") -> np.ndarray:
    """p values adjusted for multiple comparisons (family-wise error rate).

    Parameters
    ----------
    p : sequence of float
        Unadjusted p values (NaN stays NaN and is left out of the family).
    method : {"holm", "bonferroni", "none"}
        Holm's step-down method (Holm 1979, common practice: uniformly more powerful than
        Bonferroni, same guarantee), Bonferroni's ``min(1, m p)``, or no adjustment.

    Returns
    -------
    ndarray
    """
    if method not in _CORRECTIONS:
        raise ParameterError(f"correction must be one of {_CORRECTIONS}, got {method!r}.")
    pa = np.asarray(p, dtype=float)
    out = np.full_like(pa, np.nan)
    ok = np.flatnonzero(np.isfinite(pa))
    m = ok.size
    if m == 0 or method == "none":
        out[ok] = pa[ok]
        return out
    if method == "bonferroni":
        out[ok] = np.minimum(1.0, m * pa[ok])
        return out
    order = ok[np.argsort(pa[ok], kind="stable")]
    stepped = np.maximum.accumulate((m - np.arange(m)) * pa[order])
    out[order] = np.minimum(1.0, stepped)
    return out


# ------------------------------------------------------------------------ pairwise tests
@dataclass(frozen=True)
class GroupComparison:
    """Pairwise differences of one per-group parameter (see :func:`compare_groups`).

    Attributes
    ----------
    parameter : str
    table : pandas.DataFrame
        One row per pair: ``group_a, group_b, difference`` (a - b), ``stderr, ci_low, ci_high``
        (unadjusted Wald interval), ``t, p`` (two-sided, unadjusted), ``p_adjusted`` and
        ``significant`` (``p_adjusted < alpha``).
    correction : str
        The multiplicity correction used.
    alpha : float
    dof : int
        Degrees of freedom of the t tests (the joint fit's residual degrees of freedom).
    """

    parameter: str
    table: pd.DataFrame
    correction: str
    alpha: float
    dof: int

    def summary(self) -> str:
        """Plain-text report naming the test and the correction."""
        how = {
            "holm": "Holm's step-down correction",
            "bonferroni": "Bonferroni's correction",
            "none": "no correction for multiple comparisons",
        }[self.correction]
        lines = [
            f"pairwise differences of {self.parameter!r} between groups",
            f"Wald t tests from the joint covariance on {self.dof} degrees of freedom; "
            f"p values adjusted by {how} (alpha = {self.alpha:g})",
            "",
            self.table.to_string(index=False, float_format=lambda v: f"{v:.4g}"),
        ]
        sig = self.table[self.table["significant"]]
        lines.append("")
        if len(sig):
            pairs = ", ".join(
                f"{a} vs {b}" for a, b in zip(sig["group_a"], sig["group_b"], strict=True)
            )
            lines.append(f"Pairs that differ beyond chance: {pairs}.")
        else:
            lines.append("No pair differs beyond what chance allows at this level.")
        lines.append("")
        lines.append(_CAUTION)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def _repr_html_(self) -> str:
        e = html.escape
        t: str = self.table.to_html(index=False, float_format=lambda v: f"{v:.4g}")
        return (
            "<div class='cw-pairs' style='font-family:sans-serif;font-size:13px'>"
            f"<div>{e(self.parameter)}: pairwise Wald t tests, {e(self.correction)} correction "
            f"(alpha = {self.alpha:g}, {self.dof} dof)</div>{t}"
            f"<div style='font-size:11px;opacity:0.75'>{e(_CAUTION)}</div></div>"
        )


def compare_groups(
    result: GlobalResult, name: str, *, correction: str = "holm", alpha: float = 0.05
) -> GroupComparison:
    """Is group a's value of ``name`` different from group b's? Every pair, corrected.

    Parameters
    ----------
    result : GlobalResult
    name : str
        A parameter fitted per group.
    correction : {"holm", "bonferroni", "none"}
        Multiplicity correction of the family of pairwise p values.
    alpha : float
        Family-wise level for ``significant``.

    Returns
    -------
    GroupComparison

    Raises
    ------
    ParameterError
        ``name`` is not fitted per group, or bad ``correction``/``alpha``.
    """
    if name not in result.per_group:
        raise ParameterError(
            f"{name!r} is not fitted per group in this fit (per group: "
            f"{list(result.per_group)}); only those can differ between groups."
        )
    if correction not in _CORRECTIONS:
        raise ParameterError(f"correction must be one of {_CORRECTIONS}, got {correction!r}.")
    if not (isinstance(alpha, (int, float)) and 0.0 < float(alpha) < 1.0):
        raise ParameterError(f"alpha must be between 0 and 1 (e.g. 0.05); got {alpha!r}.")
    col = {n: i for i, n in enumerate(result.free)}
    cov = np.asarray(result.cov)
    exact = result.absolute_sigma
    q = quantile(0.95, result.dof, known_sigma=exact)
    rows = []
    for a, b in itertools.combinations(result.labels, 2):
        ia, ib = col[f"{name}[{a}]"], col[f"{name}[{b}]"]
        d = result.estimates[f"{name}[{a}]"] - result.estimates[f"{name}[{b}]"]
        var = cov[ia, ia] + cov[ib, ib] - 2.0 * cov[ia, ib]
        se = math.sqrt(var) if var > 0 else math.nan
        if exact or result.dof > 0:
            tt, pp = parameter_tests([d], [se], result.dof, known_sigma=exact)
            t, p = float(tt[0]), float(pp[0])
        else:
            t, p = math.nan, math.nan
        rows.append(
            {
                "group_a": a,
                "group_b": b,
                "difference": d,
                "stderr": se,
                "ci_low": d - q * se,
                "ci_high": d + q * se,
                "t": t,
                "p": p,
            }
        )
    table = pd.DataFrame(
        rows,
        columns=["group_a", "group_b", "difference", "stderr", "ci_low", "ci_high", "t", "p"],
    )
    table["p_adjusted"] = adjust_p(table["p"].to_numpy(dtype=float), correction)
    table["significant"] = table["p_adjusted"].to_numpy(dtype=float) < float(alpha)
    return GroupComparison(name, table, correction, float(alpha), result.dof)


# ------------------------------------------------------------------------ shared or not
@dataclass(frozen=True)
class SharedTest:
    """Whether one value of a parameter serves every group (see :func:`shared_or_separate`).

    Attributes
    ----------
    parameter : str
    F, p : float
        Extra-sum-of-squares F statistic and its p value (shared is the simpler model).
    df_num, df_den : int
    aicc_shared, aicc_separate : float
    alpha : float
    conclusion : str
        Plain-language reading of the test.
    comparison : Comparison
        The full comparison (table, F test, AICc weights, reasoning).
    shared_fit, separate_fit : GlobalResult
        The two fits.
    """

    parameter: str
    F: float
    p: float
    df_num: int
    df_den: int
    aicc_shared: float
    aicc_separate: float
    alpha: float
    conclusion: str
    comparison: Comparison
    shared_fit: GlobalResult
    separate_fit: GlobalResult

    @property
    def differ(self) -> bool:
        """True when the F test finds the groups different at ``alpha``."""
        return bool(math.isfinite(self.p) and self.p < self.alpha)

    def summary(self) -> str:
        """Plain-text report: F, p, AICc and the conclusion."""
        return "\n".join(
            [
                f"one {self.parameter!r} for all groups, or one per group?",
                f"  F({self.df_num}, {self.df_den}) = {self.F:.4g}, p = {self.p:.3g}",
                f"  AICc shared {self.aicc_shared:.6g}, per group {self.aicc_separate:.6g}",
                "",
                self.conclusion,
                "",
                _CAUTION,
            ]
        )

    def __str__(self) -> str:
        return self.summary()

    def _repr_html_(self) -> str:
        e = html.escape
        return (
            "<div class='cw-shared-test' style='font-family:sans-serif;font-size:13px'>"
            f"<div><b>{e(self.parameter)}</b>: F({self.df_num}, {self.df_den}) = "
            f"{self.F:.4g}, p = {self.p:.3g}; AICc shared {self.aicc_shared:.6g}, per group "
            f"{self.aicc_separate:.6g}</div><p>{e(self.conclusion)}</p>"
            f"<div style='font-size:11px;opacity:0.75'>{e(_CAUTION)}</div></div>"
        )


def shared_or_separate(result: GlobalResult, name: str, alpha: float = 0.05) -> SharedTest:
    """Do the groups differ in ``name``? Fit it shared and per group and compare the fits.

    The fit not at hand is made with the same data, groups and options, starting from this
    fit's values.

    Parameters
    ----------
    result : GlobalResult
    name : str
        A free model parameter (shared or per group in ``result``).
    alpha : float
        Level of the F test.

    Returns
    -------
    SharedTest

    Raises
    ------
    ParameterError
        ``name`` is neither shared nor per group (fixed, a constant, linked or unknown).
    ComparisonError
        One of the fits did not converge, or used a robust loss.
    """
    from curvewright.fitting.global_fit import refit_with_shared

    if name not in result.shared and name not in result.per_group:
        raise ParameterError(
            f"{name!r} is not a free parameter of this fit (shared: {list(result.shared)}, per "
            f"group: {list(result.per_group)}); only those can be tested."
        )
    if not (isinstance(alpha, (int, float)) and 0.0 < float(alpha) < 1.0):
        raise ParameterError(f"alpha must be between 0 and 1 (e.g. 0.05); got {alpha!r}.")
    if name in result.shared:
        shared_fit = result
        separate_fit = refit_with_shared(result, [s for s in result.shared if s != name])
    else:
        separate_fit = result
        shared_fit = refit_with_shared(result, [*result.shared, name])
    cmp = compare_global(
        [shared_fit, separate_fit],
        names=[f"{name} shared", f"{name} per group"],
        alpha=alpha,
        prefer="f",
    )
    row = cmp.f_tests.iloc[0]
    F, p = float(row["F"]), float(row["p"])
    dn, dd = int(row["df_num"]), int(row["df_den"])
    a_s, a_g = shared_fit.aicc, separate_fit.aicc
    aicc_word = (
        "AICc agrees: it is lower with one value per group"
        if a_g < a_s
        else "AICc, which weighs the better fit against the extra parameters, prefers the "
        "single shared value all the same"
    )
    if not math.isfinite(p):
        text = (
            f"The fit with one {name} per group is not better than the fit with one shared "
            f"{name}, so there is no sign of a difference; if that is unexpected, the per-group "
            "fit may not have reached its best point (refit it from other starts)."
        )
    elif p < alpha:
        text = (
            f"The groups differ in {name}: giving each group its own {name} lowers the sum of "
            f"squares more than chance would (F({dn}, {dd}) = {F:.4g}, p = {p:.3g} < "
            f"{alpha:g}). {aicc_word}. compare_groups({name!r}) on the per-group fit says "
            "which groups differ."
        )
    else:
        aicc_note = (
            "AICc also favours the shared value"
            if a_s <= a_g
            else "AICc leans towards separate values, so the evidence is mixed"
        )
        text = (
            f"The data do not show that the groups differ in {name} (F({dn}, {dd}) = {F:.4g}, "
            f"p = {p:.3g} >= {alpha:g}); one shared {name} describes them all. {aicc_note}. "
            "Not finding a difference is not proof that there is none: a small difference can "
            "hide in noisy or sparse data."
        )
    return SharedTest(
        parameter=name,
        F=F,
        p=p,
        df_num=dn,
        df_den=dd,
        aicc_shared=a_s,
        aicc_separate=a_g,
        alpha=float(alpha),
        conclusion=text,
        comparison=cmp,
        shared_fit=shared_fit,
        separate_fit=separate_fit,
    )


# ------------------------------------------------------------------------ compare


# GlobalResult's question methods reach these through the registry (result layer below us).
register_statistics(shared_or_separate=shared_or_separate, compare_groups=compare_groups)
