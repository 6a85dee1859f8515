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
from typing import Any

import numpy as np
import pandas as pd
import scipy.stats

from curvewright.errors import ComparisonError, ParameterError
from curvewright.global_result import GlobalResult
from curvewright.result import CAUTION as _CAUTION
from curvewright.stats.compare import Comparison, _recommend, akaike_weights, extra_ss_f_test

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
    q = (
        float(scipy.stats.norm.ppf(0.975))
        if exact
        else float(scipy.stats.t.ppf(0.975, result.dof))
        if result.dof > 0
        else math.nan
    )
    rows = []
    for a, b in itertools.combinations(result.labels, 2):
        ia, ib = col[f"{name}[{a}]"], col[f"{name}[{b}]"]
        d = result.estimates[f"{name}[{a}]"] - result.estimates[f"{name}[{b}]"]
        var = cov[ia, ia] + cov[ib, ib] - 2.0 * cov[ia, ib]
        se = math.sqrt(var) if var > 0 else math.nan
        t = d / se if se > 0 else math.nan
        if not math.isfinite(t):
            p = math.nan
        elif exact:
            p = float(2.0 * scipy.stats.norm.sf(abs(t)))
        else:
            p = float(2.0 * scipy.stats.t.sf(abs(t), result.dof))
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
def _check_global(r: object, label: str) -> GlobalResult:
    if not isinstance(r, GlobalResult):
        raise ComparisonError(
            f"{label} is a {type(r).__name__}: global fits can be compared only with other "
            "global fits (results of curvewright.fit_global) of the same data."
        )
    if r.loss != "squared":
        raise ComparisonError(
            f"{label!r} used the robust {r.loss!r} loss: the F test and AICc compare least-"
            "squares fits. Refit with loss='squared' to compare."
        )
    if not r.success:
        raise ComparisonError(
            f"{label!r} did not converge ({r.message}); its sum of squares is not its best, so "
            "any comparison would be misleading. Refit it first."
        )
    return r


def _same_data(fits: Sequence[GlobalResult], labels: Sequence[str]) -> None:
    ref = fits[0]
    for r, lab in zip(fits[1:], labels[1:], strict=True):
        same_w = (r.weights is None and ref.weights is None) or (
            r.weights is not None
            and ref.weights is not None
            and np.allclose(r.weights, ref.weights, rtol=1e-12, atol=0.0)
        )
        if (
            r.keys != ref.keys
            or r.n != ref.n
            or not (np.array_equal(r.x, ref.x) and np.array_equal(r.y, ref.y))
        ):
            raise ComparisonError(
                f"{lab!r} and {labels[0]!r} were fitted to different groups or data: sums of "
                "squares and AICc are comparable only on the same points."
            )
        if r.weighting != ref.weighting or not same_w:
            raise ComparisonError(
                f"{lab!r} and {labels[0]!r} used different weights; refit both with the same."
            )


def _nested(simple: GlobalResult, large: GlobalResult) -> bool:
    """``simple`` is ``large`` with more parameters shared (same model, constants, holds)."""
    return (
        simple.model.same_form(large.model)
        and simple.constants == large.constants
        and simple.fixed == large.fixed
        and dict(simple.linked) == dict(large.linked)
        and set(simple.shared) | set(simple.per_group) == set(large.shared) | set(large.per_group)
        and set(simple.shared) > set(large.shared)
        and all(
            simple.options.get("fixed", {}).get(k) == v
            for k, v in large.options.get("fixed", {}).items()
        )
    )


def compare_global(
    results: Sequence[GlobalResult],
    *,
    names: Sequence[str] | None = None,
    nested: bool | None = None,
    alpha: float = 0.05,
    prefer: str = "auto",
) -> Comparison:
    """Compare global fits of the same data (what :func:`curvewright.compare` does for them).

    Two fits are nested when they use the same model, constants and fixed values and one
    shares a strict superset of the other's shared parameters; nested pairs get the
    extra-sum-of-squares F test. AICc is always reported.

    Parameters
    ----------
    results : sequence of GlobalResult
    names : sequence of str, optional
        Labels (default: "shared: ..." of each).
    nested : None or bool
        None: detect nested pairs; False: no F tests; True: require every pair that differs in
        its shared set to be nested (a ComparisonError otherwise).
    alpha, prefer
        As for :func:`curvewright.compare`.

    Returns
    -------
    Comparison
    """
    if len(results) < 2:
        raise ComparisonError(f"compare needs at least two fits; got {len(results)}.")
    if not (isinstance(alpha, (int, float)) and 0.0 < float(alpha) < 1.0):
        raise ParameterError(f"alpha must be between 0 and 1 (e.g. 0.05); got {alpha!r}.")
    if prefer not in ("auto", "f", "aicc"):
        raise ParameterError(f"prefer must be 'auto', 'f' or 'aicc'; got {prefer!r}.")
    if nested is not None and not isinstance(nested, bool):
        raise ParameterError(
            "nested must be None (detect) or a bool for global fits; nesting is read from the "
            "shared parameters."
        )
    fits = [_check_global(r, f"fit {i + 1}") for i, r in enumerate(results)]
    if names is not None:
        labels = [str(n) for n in names]
        if len(labels) != len(fits) or len(set(labels)) != len(labels):
            raise ParameterError(f"names must give one distinct label per fit, got {labels}.")
    else:
        labels = [f"{r.model.name} (shared: {', '.join(r.shared) or 'none'})" for r in fits]
        labels = [
            lab if labels.count(lab) == 1 else f"{lab} #{i + 1}" for i, lab in enumerate(labels)
        ]
    _same_data(fits, labels)
    delta, weights = akaike_weights([r.aicc for r in fits])
    table = pd.DataFrame(
        {
            "model": [r.model.name for r in fits],
            "n": [r.n for r in fits],
            "free_params": [r.nfree for r in fits],
            "dof": [r.dof for r in fits],
            "ssr": [r.ssr for r in fits],
            "r2": [r.r2 for r in fits],
            "aicc": [r.aicc for r in fits],
            "delta_aicc": delta,
            "akaike_weight": weights,
            "bic": [r.bic for r in fits],
        },
        index=pd.Index(labels, name="fit"),
    )
    rows: list[dict[str, Any]] = []
    if nested is not False:
        for i, j in itertools.permutations(range(len(fits)), 2):
            if _nested(fits[i], fits[j]):
                s, b = fits[i], fits[j]
                F, dn, dd, p = extra_ss_f_test(s.ssr, s.dof, b.ssr, b.dof)
                rows.append(
                    {
                        "simpler": labels[i],
                        "larger": labels[j],
                        "how": "detected (more parameters shared)",
                        "df_num": dn,
                        "df_den": dd,
                        "F": F,
                        "p": p,
                        "significant": bool(p < alpha) if math.isfinite(p) else False,
                    }
                )
            elif (
                nested is True
                and i < j
                and set(fits[i].shared) != set(fits[j].shared)
                and not _nested(fits[j], fits[i])
            ):
                raise ComparisonError(
                    f"{labels[i]!r} and {labels[j]!r} are not nested: one must share every "
                    "parameter the other shares and more, with the same model and holds."
                )
    f_tests = pd.DataFrame(
        rows, columns=["simpler", "larger", "how", "df_num", "df_den", "F", "p", "significant"]
    )
    preferred, criterion, recommendation, reasoning = _recommend(
        fits,  # type: ignore[arg-type]  # _recommend reads only .diagnostics of a fit
        labels,
        table,
        f_tests,
        float(alpha),
        prefer,
    )
    return Comparison(
        table=table,
        f_tests=f_tests,
        preferred=preferred,
        criterion=criterion,
        recommendation=recommendation,
        reasoning=tuple(reasoning),
        alpha=float(alpha),
    )
