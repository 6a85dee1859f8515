"""Comparing fits of several models to the same data: extra-sum-of-squares F test and AICc.

Two questions, two tools (common practice; Motulsky and Christopoulos, *Fitting Models to
Biological Data Using Linear and Nonlinear Regression*, 2004, chapters 21-23, and Burnham and
Anderson, *Model Selection and Multimodel Inference*, 2002, from memory):

* **Extra-sum-of-squares F test**, for *nested* models (the simpler one is the larger one with
  some parameters held at fixed values): does the drop in the weighted sum of squares exceed
  what the extra parameters would buy by chance?
  ``F = ((SSR_s - SSR_l) / (df_s - df_l)) / (SSR_l / df_l)`` on ``(df_s - df_l, df_l)``
  degrees of freedom. Exact for linear models with normal errors, approximate for nonlinear.
* **AICc with Akaike weights**, for any set of models fitted to the same data:
  ``w_i = exp(-Delta_i / 2) / sum_j exp(-Delta_j / 2)`` with ``Delta_i = AICc_i - min AICc``,
  the weight of evidence that model i is the best of the set (in Kullback-Leibler terms).
  AICc uses ``K = free parameters + 1`` (see :mod:`curvewright.numerics`).

Nesting is detected when two fits use the same model and one holds parameters fixed that the
other estimates (at values consistent with the other's fixed ones), and for known pairs of
catalog models (a straight line inside any polynomial, polynomials of increasing degree, the
3PL inside the 4PL with zero_dose = 0, the 4PL inside the 5PL with g = 1, Michaelis-Menten inside
the Hill equation with n_h = 1), each confirmed numerically: the larger model with those
values fixed must reproduce the simpler model's curve. Any other nesting can be declared.
Global fits of the same model nest when one shares or holds fixed more parameters than the
other (:func:`compare_global`).
"""

from __future__ import annotations

import html
import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import scipy.stats

from curvewright.errors import ComparisonError, ParameterError
from curvewright.global_result import GlobalResult
from curvewright.thresholds import CAUTION as _CAUTION

if TYPE_CHECKING:
    from curvewright.result import FitResult

__all__ = ["Comparison", "akaike_weights", "compare", "compare_global", "extra_ss_f_test"]


# ------------------------------------------------------------------------------ plain maths
def extra_ss_f_test(
    ssr_simple: float, dof_simple: int, ssr_large: float, dof_large: int
) -> tuple[float, int, int, float]:
    """Extra-sum-of-squares F test of a simpler model nested in a larger one.

    Parameters
    ----------
    ssr_simple, dof_simple : float, int
        (Weighted) residual sum of squares and residual degrees of freedom of the simpler model.
    ssr_large, dof_large : float, int
        The same for the larger model (``dof_large < dof_simple``).

    Returns
    -------
    F, df_num, df_den, p : float, int, int, float
        ``F = ((ssr_simple - ssr_large) / df_num) / (ssr_large / df_den)`` with
        ``df_num = dof_simple - dof_large`` and ``df_den = dof_large``; ``p`` is the upper tail
        of F(df_num, df_den). NaN F and p when the larger model fits worse (it did not reach
        its best fit) or fits exactly.

    Raises
    ------
    ComparisonError
        ``dof_large >= dof_simple`` or ``dof_large < 1``.
    """
    dn = int(dof_simple) - int(dof_large)
    dd = int(dof_large)
    if dn < 1:
        raise ComparisonError(
            f"the larger model must have more free parameters (fewer residual degrees of "
            f"freedom) than the simpler one; got {dof_large} and {dof_simple} residual degrees "
            "of freedom."
        )
    if dd < 1:
        raise ComparisonError(
            "the larger model leaves no residual degrees of freedom (as many free parameters "
            "as points); the F test needs at least one."
        )
    if not (ssr_large > 0) or ssr_simple < ssr_large:
        return math.nan, dn, dd, math.nan
    F = ((float(ssr_simple) - float(ssr_large)) / dn) / (float(ssr_large) / dd)
    return F, dn, dd, float(scipy.stats.f.sf(F, dn, dd))


def akaike_weights(aicc: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    """Differences from the best AICc and Akaike weights.

    ``Delta_i = AICc_i - min AICc`` and ``w_i = exp(-Delta_i/2) / sum_j exp(-Delta_j/2)``
    (Burnham and Anderson 2002, section 2.9). An infinite AICc (too few points for the model)
    gets weight 0.

    Returns
    -------
    delta, weights : ndarray
    """
    a = np.asarray(aicc, dtype=float)
    finite = np.isfinite(a)
    if not np.any(finite):
        raise ComparisonError(
            "no fit has a finite AICc (each has too few points for its parameters: AICc needs "
            "n > K + 1 with K = free parameters + 1)."
        )
    best = float(np.min(a[finite]))
    delta = np.where(finite, a - best, np.inf)
    rel = np.where(finite, np.exp(-0.5 * np.where(finite, delta, 0.0)), 0.0)
    return delta, rel / rel.sum()


# ------------------------------------------------------------------------------ the record
@dataclass(frozen=True)
class Comparison:
    """The outcome of :func:`compare`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per fit (indexed by label): ``model, n, free_params, dof, ssr, r2, aicc,
        delta_aicc, akaike_weight, bic``.
    f_tests : pandas.DataFrame
        One row per nested pair tested: ``simpler, larger, how, df_num, df_den, F, p,
        significant``; ``how`` says whether the nesting was detected or declared. Empty when
        no pair is nested.
    preferred : str
        Label of the recommended fit.
    criterion : str
        ``"F test"`` or ``"AICc"``: what the recommendation rests on.
    recommendation : str
        One plain sentence.
    reasoning : tuple of str
        The steps behind it, in plain language, including where the criteria disagree.
    alpha : float
        Significance level of the F tests.
    """

    table: pd.DataFrame
    f_tests: pd.DataFrame
    preferred: str
    criterion: str
    recommendation: str
    reasoning: tuple[str, ...]
    alpha: float
    results: tuple[FitResult, ...] = field(repr=False, default=())

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (for the widget): rows as lists of dicts, NaN and infinities as None."""

        def clean(v: Any) -> Any:
            if isinstance(v, (bool, np.bool_)):
                return bool(v)
            if isinstance(v, (int, np.integer)):
                return int(v)
            if isinstance(v, (float, np.floating)):
                return float(v) if math.isfinite(float(v)) else None
            return v

        table = [
            {"fit": str(i), **{k: clean(v) for k, v in rec.items()}}
            for i, rec in zip(self.table.index, self.table.to_dict("records"), strict=True)
        ]
        tests = [{k: clean(v) for k, v in rec.items()} for rec in self.f_tests.to_dict("records")]
        return {
            "table": table,
            "f_tests": tests,
            "preferred": self.preferred,
            "criterion": self.criterion,
            "recommendation": self.recommendation,
            "reasoning": list(self.reasoning),
            "alpha": self.alpha,
            "caution": _CAUTION,
        }

    def summary(self) -> str:
        """Plain-text report: the table, the F tests, the recommendation and its reasoning."""
        lines = ["model comparison (same data, same weights)", "=" * 42]
        lines.append(self.table.to_string(float_format=lambda v: f"{v:.6g}"))
        if len(self.f_tests):
            lines.append("")
            lines.append(f"extra-sum-of-squares F tests (alpha = {self.alpha:g})")
            lines.append(self.f_tests.to_string(float_format=lambda v: f"{v:.4g}"))
        lines.append("")
        lines.append("recommendation: " + self.recommendation)
        lines.extend(f"  - {r}" for r in self.reasoning)
        lines.append("")
        lines.append(_CAUTION)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def _repr_html_(self) -> str:
        e = html.escape
        t: str = self.table.to_html(float_format=lambda v: f"{v:.6g}")
        f = (
            f"<div>F tests (alpha = {self.alpha:g})</div>"
            + str(self.f_tests.to_html(float_format=lambda v: f"{v:.4g}"))
            if len(self.f_tests)
            else ""
        )
        reasons = "".join(f"<li>{e(r)}</li>" for r in self.reasoning)
        return (
            "<div class='cw-comparison' style='font-family:sans-serif;font-size:13px'>"
            f"{t}{f}<p><b>{e(self.recommendation)}</b></p><ul>{reasons}</ul>"
            f"<div style='font-size:11px;opacity:0.75'>{e(_CAUTION)}</div></div>"
        )


# ------------------------------------------------------------------------------ checks
def _check_same_data(results: Sequence[FitResult], labels: Sequence[str]) -> None:
    ref, ref_label = results[0], labels[0]
    for r, lab in zip(results[1:], labels[1:], strict=True):
        if r.n != ref.n:
            raise ComparisonError(
                f"{lab!r} was fitted to {r.n} points and {ref_label!r} to {ref.n}: fits can be "
                "compared only on the same data (check exclusions and dropped NaN rows)."
            )
        if not (np.array_equal(r.x, ref.x) and np.array_equal(r.y, ref.y)):
            raise ComparisonError(
                f"{lab!r} and {ref_label!r} were fitted to different data (the x or y values "
                "differ): sums of squares and AICc are comparable only on the same points."
            )
        same_w = (r.weights is None and ref.weights is None) or (
            r.weights is not None
            and ref.weights is not None
            and np.allclose(r.weights, ref.weights, rtol=1e-12, atol=0.0)
        )
        if r.weighting != ref.weighting or not same_w:
            raise ComparisonError(
                f"{lab!r} used weighting {r.weighting!r} and {ref_label!r} used "
                f"{ref.weighting!r} (or different sigma): a weighted sum of squares is on "
                "another scale; refit both with the same weights."
            )


def _check_fit(r: object, label: str) -> FitResult:
    from curvewright.result import FitResult

    if not isinstance(r, FitResult):
        raise ComparisonError(
            f"{label} is a {type(r).__name__}, not a FitResult; pass results of curvewright.fit."
        )
    if r.loss != "squared":
        raise ComparisonError(
            f"{label!r} used the robust {r.loss!r} loss: the F test and AICc compare least-"
            "squares fits. Refit with loss='squared' (after excluding outliers) to compare."
        )
    if r.code == "degenerate_stop":
        raise ComparisonError(
            f"{label!r} stopped at a degenerate point (a parameter the data do not determine, "
            "see its notes): the model is not identified by these data, so a comparison "
            "would be misleading. Fix the undetermined parameter, or compare without this model."
        )
    if not r.success:
        raise ComparisonError(
            f"{label!r} did not converge ({r.message}); its sum of squares is not its best, so "
            "any comparison would be misleading. Refit it first."
        )
    return r


def _labels(results: Sequence[FitResult], names: Sequence[str] | None) -> list[str]:
    if names is not None:
        labels = [str(n) for n in names]
        if len(labels) != len(results):
            raise ParameterError(
                f"names must give one label per fit: {len(results)} fits, {len(labels)} names."
            )
        if len(set(labels)) != len(labels):
            raise ParameterError(f"names must be distinct, got {labels}.")
        return labels
    out: list[str] = []
    for r in results:
        lab = r.model.name
        if r.fixed:
            lab += " (" + ", ".join(f"{k}={r.values[k]:.4g}" for k in r.fixed) + ")"
        out.append(lab)
    seen: dict[str, int] = {}
    for i, lab in enumerate(out):
        if out.count(lab) > 1:
            seen[lab] = seen.get(lab, 0) + 1
            out[i] = f"{lab} #{seen[lab]}"
    return out


# ------------------------------------------------------------------------------ nesting
def _poly_degree(r: FitResult) -> int | None:
    deg = r.model.polynomial_degree
    return None if deg is None else int(deg)


#: Catalog models nested in others: (simpler, larger) -> values to fix in the larger one.
_KNOWN_NESTINGS: dict[tuple[str, str], dict[str, float]] = {
    ("stimulation_3pl", "stimulation_4pl"): {"zero_dose": 0.0},
    ("stimulation_4pl", "stimulation_5pl"): {"g": 1.0},
    ("inhibition_4pl", "inhibition_5pl"): {"g": 1.0},
    ("michaelis_menten", "hill"): {"n_h": 1.0},
}


def _known_mapping(simple: FitResult, large: FitResult) -> dict[str, float] | None:
    """Values to fix in ``large`` so that it becomes ``simple``'s model (None: not known).

    The mapping assumes shared parameter names mean the same thing; the caller confirms it
    numerically.
    """
    a, b = simple.model.name, large.model.name
    ds, dl = _poly_degree(simple), _poly_degree(large)
    if ds is not None and dl is not None and ds < dl:
        # the coefficients above the simpler polynomial's degree are 0
        return dict.fromkeys(large.model.param_names[ds + 1 :], 0.0)
    direct = _KNOWN_NESTINGS.get((a, b))
    if direct is not None:
        return dict(direct)
    # one step of transitivity (3PL inside 5PL through the 4PL)
    for (lo, mid), first in _KNOWN_NESTINGS.items():
        second = _KNOWN_NESTINGS.get((mid, b))
        if lo == a and second is not None:
            return {**first, **second}
    return None


def _rename_for(simple: FitResult, large: FitResult) -> dict[str, str]:
    # Michaelis-Menten's Km is the Hill equation's K0.5.
    if (simple.model.name, large.model.name) == ("michaelis_menten", "hill"):
        return {"Km": "K05"}
    if simple.model.polynomial_degree is not None and large.model.polynomial_degree is not None:
        # polynomial coefficients in order of power, whatever they are called
        return dict(zip(simple.model.param_names, large.model.param_names, strict=False))
    return {}


def _curves_agree(simple: FitResult, large: FitResult, fix: Mapping[str, float]) -> bool:
    """Whether ``large``'s model with ``fix`` and ``simple``'s values gives ``simple``'s curve."""
    ren = _rename_for(simple, large)
    vals = dict(large.model.defaults())
    for k, v in simple.values.items():
        vals[ren.get(k, k)] = v
    if not {ren.get(k, k) for k in simple.values} <= set(large.model.param_names):
        return False
    vals.update(fix)
    x = np.asarray(simple.x, dtype=float)
    try:
        got = large.model.eval(x, vals)
    except Exception:
        # A user's model may raise on these values; then it is not this nesting.
        return False
    want = np.asarray(simple.fitted, dtype=float)
    scale = float(np.max(np.abs(want))) if want.size else 1.0
    return bool(np.all(np.isfinite(got)) and np.allclose(got, want, rtol=1e-9, atol=1e-9 * scale))


def _nested(simple: FitResult, large: FitResult) -> bool:
    """Whether ``simple`` is ``large`` with some parameters held at fixed values."""
    if simple.nfree >= large.nfree:
        return False
    if simple.model.same_form(large.model) and dict(simple.linked) == dict(large.linked):
        # Everything large holds fixed, simple holds fixed at the same value; simple holds more.
        for k in large.fixed:
            if k not in simple.fixed or simple.values[k] != large.values[k]:
                return False
        return set(simple.free) < set(large.free)
    fix = _known_mapping(simple, large)
    if fix is None or large.fixed or simple.fixed or simple.linked or large.linked:
        return False
    return _curves_agree(simple, large, fix)


def _resolve_pairs(
    results: Sequence[FitResult],
    labels: Sequence[str],
    nested: bool | Sequence[tuple[int | str, int | str]] | None,
) -> list[tuple[int, int, str]]:
    """(simpler index, larger index, how) for each pair to F-test."""
    idx = {lab: i for i, lab in enumerate(labels)}

    def index(v: int | str) -> int:
        if isinstance(v, str):
            if v not in idx:
                raise ParameterError(f"nested names unknown fit {v!r}; labels are {list(labels)}.")
            return idx[v]
        if isinstance(v, bool) or not 0 <= int(v) < len(results):
            raise ParameterError(f"nested index {v!r} is out of range for {len(results)} fits.")
        return int(v)

    if nested is False:
        return []
    if nested is True:
        order = sorted(range(len(results)), key=lambda i: results[i].nfree)
        out = []
        for s, b in itertools.pairwise(order):
            if results[s].nfree == results[b].nfree:
                raise ComparisonError(
                    f"nested=True declares a chain of nested models, but {labels[s]!r} and "
                    f"{labels[b]!r} have the same number of free parameters ({results[s].nfree})."
                )
            out.append((s, b, "declared"))
        return out
    if nested is None:
        out = []
        for i, ri in enumerate(results):
            for j, rj in enumerate(results):
                if i != j and _nested(ri, rj):
                    out.append((i, j, "detected"))
        return out
    pairs = []
    for pair in nested:
        if len(pair) != 2:
            raise ParameterError(f"each nested pair must be (simpler, larger); got {pair!r}.")
        s, b = index(pair[0]), index(pair[1])
        if results[s].nfree >= results[b].nfree:
            raise ComparisonError(
                f"{labels[s]!r} is declared nested in {labels[b]!r}, but it has "
                f"{results[s].nfree} free parameters and the larger only {results[b].nfree}."
            )
        pairs.append((s, b, "declared"))
    return pairs


# ------------------------------------------------------------------------------ compare
def compare(
    *results: FitResult | GlobalResult,
    names: Sequence[str] | None = None,
    nested: bool | Sequence[tuple[int | str, int | str]] | None = None,
    alpha: float = 0.05,
    prefer: str = "auto",
) -> Comparison:
    """Compare fits of different models (or the same model with parameters fixed) to one dataset.

    Parameters
    ----------
    *results : FitResult or GlobalResult
        Two or more least-squares fits to the same points with the same weights. Global fits
        (:func:`curvewright.fit_global`) are compared with each other: nested when one shares
        or holds fixed more parameters than the other (see :func:`compare_global`).
    names : sequence of str, optional
        Labels for the fits (default: the model names, with fixed values).
    nested : None, bool or sequence of (simpler, larger)
        ``None`` (default): detect nested pairs (see the module notes). ``True``: declare that
        the fits form a nested chain (ordered by number of free parameters). ``False``: no F
        tests. Or explicit pairs of labels or indices, simpler first.
    alpha : float
        Significance level of the F tests.
    prefer : {"auto", "f", "aicc"}
        What the recommendation rests on. ``"auto"``: the F test when exactly two fits are
        compared and they are nested, AICc otherwise. Both are always reported.

    Returns
    -------
    Comparison

    Raises
    ------
    ComparisonError
        Fewer than two fits, a fit that is not a FitResult, did not converge or used a robust
        loss, fits to different data or with different weights, or a declared nesting that
        cannot hold.
    ParameterError
        Bad ``names``, ``alpha``, ``prefer`` or ``nested`` entries.

    Notes
    -----
    Only fits to the same data and weights can be compared: AICc and the sums of squares are
    on the scale of the data. The F test assumes the simpler model is the larger one with
    parameters fixed at values inside their ranges; fixing a parameter at a bound (e.g. a
    second phase's amplitude at 0) makes its p value only approximate.
    """
    if any(isinstance(r, GlobalResult) for r in results):
        # Global fits (several groups) nest by their shared parameters (compare_global).
        if nested is not None and not isinstance(nested, bool):
            raise ParameterError(
                "nested must be None or a bool for global fits; nesting is read from the "
                "shared parameters."
            )
        return compare_global(
            list(results),  # type: ignore[arg-type]  # compare_global checks every one
            names=names,
            nested=nested,
            alpha=alpha,
            prefer=prefer,
        )
    if len(results) < 2:
        raise ComparisonError(f"compare needs at least two fits; got {len(results)}.")
    if not (isinstance(alpha, (int, float)) and 0.0 < float(alpha) < 1.0):
        raise ParameterError(f"alpha must be between 0 and 1 (e.g. 0.05); got {alpha!r}.")
    if prefer not in ("auto", "f", "aicc"):
        raise ParameterError(f"prefer must be 'auto', 'f' or 'aicc'; got {prefer!r}.")
    fits = [_check_fit(r, f"fit {i + 1}") for i, r in enumerate(results)]
    labels = _labels(fits, names)
    _check_same_data(fits, labels)

    table = _fit_table(fits, labels)

    rows = []
    for s, b, how in _resolve_pairs(fits, labels, nested):
        F, dn, dd, p = extra_ss_f_test(fits[s].ssr, fits[s].dof, fits[b].ssr, fits[b].dof)
        rows.append(
            {
                "simpler": labels[s],
                "larger": labels[b],
                "how": how,
                "df_num": dn,
                "df_den": dd,
                "F": F,
                "p": p,
                "significant": bool(p < alpha) if math.isfinite(p) else False,
            }
        )
    f_tests: pd.DataFrame = pd.DataFrame(
        rows, columns=["simpler", "larger", "how", "df_num", "df_den", "F", "p", "significant"]
    )

    preferred, criterion, recommendation, reasoning = _recommend(
        fits, labels, table, f_tests, float(alpha), prefer
    )
    return Comparison(
        table=table,
        f_tests=f_tests,
        preferred=preferred,
        criterion=criterion,
        recommendation=recommendation,
        reasoning=tuple(reasoning),
        alpha=float(alpha),
        results=tuple(fits),
    )


def _extra(dn: int) -> str:
    return f"{dn} extra parameters" if dn > 1 else "extra parameter"


def _recommend(
    fits: Sequence[FitResult],
    labels: Sequence[str],
    table: pd.DataFrame,
    f_tests: pd.DataFrame,
    alpha: float,
    prefer: str,
) -> tuple[str, str, str, list[str]]:
    reasons: list[str] = []
    w = np.asarray(table["akaike_weight"], dtype=float)
    d = np.asarray(table["delta_aicc"], dtype=float)
    order = np.argsort(-w)
    best = int(order[0])
    aicc_choice = labels[best]
    if len(order) > 1 and w[order[1]] > 0:
        second = int(order[1])
        ratio = w[best] / w[second]
        closeness = (
            "the data hardly distinguish them (a difference below 2 is common practice's mark "
            "of similar support)"
            if d[second] < 2
            else "clear support for it"
            if d[second] > 10
            else "moderate support for it"
        )
        # w_best / w_second is Burnham and Anderson's evidence ratio (2002, section 2.10)
        reasons.append(
            f"AICc is lowest for {aicc_choice!r} (Akaike weight {w[best]:.3f}); its evidence "
            f"ratio over the next best, {labels[second]!r}, is {ratio:.3g} (AICc difference "
            f"{d[second]:.3g}): {closeness}."
        )
    else:
        reasons.append(f"AICc is lowest for {aicc_choice!r} (Akaike weight {w[best]:.3f}).")

    f_choice: str | None = None
    for _, row in f_tests.iterrows():
        F, p = float(row["F"]), float(row["p"])
        s, b = str(row["simpler"]), str(row["larger"])
        dn, dd = int(row["df_num"]), int(row["df_den"])
        if not math.isfinite(p):
            reasons.append(
                f"F test {s!r} vs {b!r}: the larger model fits no better than the simpler one "
                "(its sum of squares is not lower), so it has not reached its best fit or adds "
                "nothing; refit it from other starting values before trusting the comparison."
            )
            f_choice = s if f_choice is None else f_choice
            continue
        if p < alpha:
            reasons.append(
                f"F test {s!r} vs {b!r}: F({dn}, {dd}) = {F:.4g}, p = {p:.3g} < {alpha:g}: the "
                f"{_extra(dn)} of {b!r} {'reduce' if dn > 1 else 'reduces'} the sum of squares "
                "more than chance would, so the data support the larger model."
            )
            verdict = b
        else:
            reasons.append(
                f"F test {s!r} vs {b!r}: F({dn}, {dd}) = {F:.4g}, p = {p:.3g} >= {alpha:g}: "
                f"the {_extra(dn)} of {b!r} {'do' if dn > 1 else 'does'} not improve the fit "
                "more than chance would, so keep the simpler model."
            )
            verdict = s
        f_choice = verdict if f_choice is None else f_choice

    use_f = (prefer == "f" or (prefer == "auto" and len(fits) == 2)) and len(f_tests) > 0
    if prefer == "f" and len(f_tests) == 0:
        reasons.append(
            "No pair of these fits is nested, so no F test applies; the recommendation rests "
            "on AICc."
        )
    if use_f and len(f_tests) > 1:
        reasons.append(
            "Several nested pairs were tested; the recommendation follows the first. For a "
            "chain, step up while each added parameter is significant."
        )
    if use_f and f_choice is not None:
        preferred, criterion = f_choice, "F test"
    else:
        preferred, criterion = aicc_choice, "AICc"
    if f_choice is not None and f_choice != aicc_choice:
        reasons.append(
            f"The criteria disagree: the F test favours {f_choice!r}, AICc favours "
            f"{aicc_choice!r}. They ask different questions (a significance test that keeps "
            "the simpler model unless the evidence is strong, against an estimate of which "
            "model predicts best); the recommendation follows "
            f"{'the F test' if criterion == 'F test' else 'AICc'}, and the parameters of "
            "interest should be reported with the model's uncertainty in mind."
        )
    i_pref = list(labels).index(preferred)
    warn = [dg.text for dg in fits[i_pref].diagnostics if dg.severity in ("warning", "error")]
    if warn:
        reasons.append(f"Note on {preferred!r}: " + " ".join(warn))
    recommendation = f"Use {preferred!r} (decided by the {criterion})."
    return preferred, criterion, recommendation, reasons


# ============================================================================ global fits
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
    if r.code == "degenerate_stop":
        raise ComparisonError(
            f"{label!r} stopped at a degenerate point (a parameter the data do not determine, "
            "see its notes): the model is not identified by these data, so a comparison "
            "would be misleading. Fix the undetermined parameter, or compare without this model."
        )
    if not r.success:
        raise ComparisonError(
            f"{label!r} did not converge ({r.message}); its sum of squares is not its best, so "
            "any comparison would be misleading. Refit it first."
        )
    return r


def _same_global_data(fits: Sequence[GlobalResult], labels: Sequence[str]) -> None:
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


def _nested_global(simple: GlobalResult, large: GlobalResult) -> bool:
    """``simple`` is ``large`` with more parameters shared or held fixed.

    Same model, constants and links; everything ``large`` holds fixed, ``simple`` holds at the
    same value; a parameter ``simple`` estimates per group is per group in ``large`` too (a
    shared one may be shared or per group there); and ``simple`` estimates fewer.
    """
    if not (
        simple.model.same_form(large.model)
        and simple.constants == large.constants
        and dict(simple.linked) == dict(large.linked)
    ):
        return False
    fs, fl = simple.options.get("fixed", {}), large.options.get("fixed", {})
    if any(k not in fs or fs[k] != v for k, v in fl.items()):
        return False
    large_free = set(large.shared) | set(large.per_group)
    return (
        set(simple.per_group) <= set(large.per_group)
        and set(simple.shared) <= large_free
        and simple.nfree < large.nfree
    )


def _global_label(r: GlobalResult) -> str:
    fixed = dict(r.options.get("fixed", {}))
    held = "; fixed: " + ", ".join(f"{k}={v:g}" for k, v in fixed.items()) if fixed else ""
    return f"{r.model.name} (shared: {', '.join(r.shared) or 'none'}{held})"


def compare_global(
    results: Sequence[GlobalResult],
    *,
    names: Sequence[str] | None = None,
    nested: bool | None = None,
    alpha: float = 0.05,
    prefer: str = "auto",
) -> Comparison:
    """Compare global fits of the same data (what :func:`curvewright.compare` does for them).

    Two fits are nested when they use the same model, constants and links and the simpler one
    shares more parameters or holds more fixed (e.g. a mixed-inhibition model with its
    uncompetitive term fixed at 0 inside the free one); nested pairs get the
    extra-sum-of-squares F test. AICc is always reported.

    Parameters
    ----------
    results : sequence of GlobalResult
    names : sequence of str, optional
        Labels (default: the model, its shared parameters and its fixed values).
    nested : None or bool
        None: detect nested pairs; False: no F tests; True: require every pair that differs in
        its shared or fixed parameters to be nested (a ComparisonError otherwise).
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
        labels = [_global_label(r) for r in fits]
        labels = [
            lab if labels.count(lab) == 1 else f"{lab} #{i + 1}" for i, lab in enumerate(labels)
        ]
    _same_global_data(fits, labels)
    table = _fit_table(fits, labels)
    rows: list[dict[str, Any]] = []
    if nested is not False:
        for i, j in itertools.permutations(range(len(fits)), 2):
            if _nested_global(fits[i], fits[j]):
                s, b = fits[i], fits[j]
                F, dn, dd, p = extra_ss_f_test(s.ssr, s.dof, b.ssr, b.dof)
                rows.append(
                    {
                        "simpler": labels[i],
                        "larger": labels[j],
                        "how": "detected (more parameters shared or fixed)",
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
                and (
                    set(fits[i].shared) != set(fits[j].shared)
                    or dict(fits[i].options.get("fixed", {}))
                    != dict(fits[j].options.get("fixed", {}))
                )
                and not _nested_global(fits[j], fits[i])
            ):
                raise ComparisonError(
                    f"{labels[i]!r} and {labels[j]!r} are not nested: one must share or fix "
                    "every parameter the other shares or fixes, and more, with the same model, "
                    "constants and fixed values."
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


def _fit_table(fits: Sequence[Any], labels: Sequence[str]) -> pd.DataFrame:
    """One row per fit: size, fit, AICc with its differences and Akaike weights, BIC."""
    delta, weights = akaike_weights([r.aicc for r in fits])
    table: pd.DataFrame = pd.DataFrame(
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
    return table
