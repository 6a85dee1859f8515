"""Write tests/data/handle_vectors.json: drags solved by curvewright.handles, for JS parity.

Run from the repository root: ``PYTHONPATH=src .venv/bin/python tools/gen_handle_vectors.py``.
``tests/test_handles.py`` rebuilds the same data in memory and compares it with the committed
file; ``js/tests/handles_parity.test.ts`` solves every case with ``js/handles.ts`` and compares.

Handle cases (``kind: "handle"``): every handle of every catalog model, dragged from the model's
default values to where the handle sits when its moved parameters are changed (reachable), plus
cases that are not reachable, stopped by a bound, hold a fixed parameter, or use log axes.
Pin cases (``kind: "pins"``): the curve tree, the free parameters and the pins.
Each case records the options exactly as ``SolveOptions`` takes them (bounds as
``[lower, upper]`` with ``null`` for an infinite end) and Python's solution.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from typing import Any

from curvewright.catalog import catalog
from curvewright.handles import HandleSolution, log_params, solve_handle, solve_pins
from curvewright.models import Model

OUTPUT = Path(__file__).resolve().parent.parent / "tests" / "data" / "handle_vectors.json"

DOSE_MODELS = (
    "inhibition_4pl",
    "inhibition_5pl",
    "stimulation_4pl",
    "stimulation_5pl",
    "stimulation_3pl",
)


def _num(v: float) -> float | None:
    return None if math.isinf(v) else v


def shifted(model: Model, values: dict[str, float], moves: tuple[str, ...]) -> dict[str, float]:
    """The moved parameters changed: by a factor in log space, else scaled and shifted."""
    logs = log_params(model)
    out = dict(values)
    for i, n in enumerate(moves):
        if n in logs:
            out[n] = values[n] * (1.5 if i % 2 == 0 else 0.7)
        else:
            out[n] = values[n] * 1.3 + 0.4 * (1 if i % 2 == 0 else -1)
    return out


def _options(
    model: Model, x_log: bool, y_log: bool, fixed: tuple[str, ...], span: list[float | None] | None
) -> dict[str, Any]:
    return {
        "xLog": x_log,
        "yLog": y_log,
        "bounds": {p.name: [_num(p.lower), _num(p.upper)] for p in model.params},
        "logParams": sorted(log_params(model)),
        "fixed": list(fixed),
        "span": span,
    }


def _solution(s: HandleSolution) -> dict[str, Any]:
    return {
        "values": s.values,
        "reached": s.reached,
        "clamped": list(s.clamped),
        "distance": s.distance,
    }


def handle_case(
    cid: str,
    model: Model,
    values: dict[str, float],
    handle: str,
    target: tuple[float, float],
    *,
    x_log: bool = False,
    y_log: bool = False,
    fixed: tuple[str, ...] = (),
    span: tuple[float | None, float | None] | None = None,
) -> dict[str, Any]:
    """One drag of a handle, solved by Python."""
    h = next(h for h in model.handles if h.name == handle)
    sol = solve_handle(
        model, values, handle, target, fixed=fixed, x_log=x_log, y_log=y_log, span=span
    )
    return {
        "id": cid,
        "kind": "handle",
        "model": model.name,
        "handle": h.to_dict(),
        "params": values,
        "target": list(target),
        "options": _options(model, x_log, y_log, fixed, None if span is None else list(span)),
        "python": _solution(sol),
    }


def pin_case(
    cid: str,
    model: Model,
    values: dict[str, float],
    free: list[str],
    pins: list[tuple[float, float]],
    *,
    y_log: bool = False,
) -> dict[str, Any]:
    """One set of pins, solved by Python."""
    assert model.expr is not None
    sol = solve_pins(model, values, pins, free=free, y_log=y_log)
    return {
        "id": cid,
        "kind": "pins",
        "model": model.name,
        "tree": model.expr.to_json(),
        "params": values,
        "free": free,
        "pins": [list(p) for p in pins],
        "options": _options(model, False, y_log, (), None),
        "python": _solution(sol),
    }


def build() -> dict[str, Any]:
    """Every case, solved by the Python side."""
    cat = catalog()
    cases: list[dict[str, Any]] = []
    for name, m in cat.items():
        base = m.defaults()
        x_log = name in DOSE_MODELS
        for h in m.handles:
            target = h.position(shifted(m, base, h.moves))
            cases.append(handle_case(f"{name}/{h.name}", m, base, h.name, target, x_log=x_log))
    # Not reachable: the half-life point moves k only, so it slides along one curve.
    decay = cat["exponential_decay"]
    d0 = {"baseline": 1.0, "amplitude": 10.0, "k": 0.5}
    cases.append(handle_case("unreachable/half_life", decay, d0, "half_life", (3.0, 9.0)))
    # A bound stops the drag: k at most 0.6, the target needs k = ln 2 / 0.5.
    capped = decay.with_param("k", value=0.5, upper=0.6)
    cases.append(handle_case("bound/half_life", capped, d0, "half_life", (0.5, 6.0)))
    # A fixed parameter stays where it is: the apex without its amplitude.
    gauss = cat["gaussian_peak"]
    g0 = {"baseline": 0.5, "amplitude": 3.0, "center": 2.0, "sigma": 0.7}
    cases.append(handle_case("fixed/apex", gauss, g0, "apex", (2.6, 5.0), fixed=("amplitude",)))
    # A given span and a log y axis.
    mm = cat["michaelis_menten"]
    cases.append(
        handle_case(
            "span_logy/km",
            mm,
            {"Vmax": 40.0, "Km": 5.0},
            "km",
            (12.0, 20.0),
            y_log=True,
            span=(50.0, 2.0),
        )
    )
    power = cat["power_law"]
    cases.append(
        pin_case(
            "pins/power_two", power, {"a": 1.0, "b": 1.0}, ["a", "b"], [(1.0, 3.0), (10.0, 30.0)]
        )
    )
    cases.append(
        pin_case(
            "pins/power_logy",
            power,
            {"a": 2.0, "b": 0.5},
            ["a", "b"],
            [(2.0, 5.0), (50.0, 7.0)],
            y_log=True,
        )
    )
    line = cat["straight_line"]
    cases.append(
        pin_case(
            "pins/line_three",
            line,
            {"intercept": 0.0, "slope": 1.0},
            ["intercept", "slope"],
            [(0.0, 1.0), (1.0, 2.5), (2.0, 3.2)],
        )
    )
    cases.append(
        pin_case("pins/mm_one_pin", mm, {"Vmax": 10.0, "Km": 2.0}, ["Vmax", "Km"], [(4.0, 9.0)])
    )
    return {
        "about": (
            "Drags solved by curvewright.handles (Python); js/handles.ts must land on the same "
            "values. Regenerate with tools/gen_handle_vectors.py."
        ),
        "cases": cases,
    }


def render() -> str:
    """The exact text written to the file."""
    return json.dumps(build(), indent=1, allow_nan=False) + "\n"


def main() -> int:
    """Write the vector file and say where."""
    data = render()
    OUTPUT.write_text(data, encoding="utf-8")
    print(f"wrote {len(json.loads(data)['cases'])} cases to {OUTPUT}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
