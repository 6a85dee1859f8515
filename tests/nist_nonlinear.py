"""Reader for the NIST StRD nonlinear files in tests/data/nist_nonlinear (see SOURCES.md).

Shared by the tests that fit them from NIST's starting points (test_fitting.py) and from the
guided start (test_start.py). Formulas are transcribed by hand from each file's "Model:" block
into curvewright's expression language.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

NIST_DIR = Path(__file__).parent / "data" / "nist_nonlinear"

# From the "Model:" block of each NIST file (pi is our constant; NIST's [ ] are parentheses).
FORMULAS: dict[str, str] = {
    "Misra1a": "b1*(1-exp(-b2*x))",
    "Misra1b": "b1 * (1-(1+b2*x/2)**(-2))",
    "Misra1c": "b1 * (1-(1+2*b2*x)**(-0.5))",
    "Misra1d": "b1*b2*x*((1+b2*x)**(-1))",
    "Chwirut1": "exp(-b1*x)/(b2+b3*x)",
    "Chwirut2": "exp(-b1*x)/(b2+b3*x)",
    "DanWood": "b1*x**b2",
    "Lanczos1": "b1*exp(-b2*x) + b3*exp(-b4*x) + b5*exp(-b6*x)",
    "Lanczos2": "b1*exp(-b2*x) + b3*exp(-b4*x) + b5*exp(-b6*x)",
    "Lanczos3": "b1*exp(-b2*x) + b3*exp(-b4*x) + b5*exp(-b6*x)",
    "Gauss1": "b1*exp(-b2*x) + b3*exp(-(x-b4)**2 / b5**2) + b6*exp(-(x-b7)**2 / b8**2)",
    "Gauss2": "b1*exp(-b2*x) + b3*exp(-(x-b4)**2 / b5**2) + b6*exp(-(x-b7)**2 / b8**2)",
    "Gauss3": "b1*exp(-b2*x) + b3*exp(-(x-b4)**2 / b5**2) + b6*exp(-(x-b7)**2 / b8**2)",
    "Kirby2": "(b1 + b2*x + b3*x**2) / (1 + b4*x + b5*x**2)",
    "Hahn1": "(b1+b2*x+b3*x**2+b4*x**3) / (1+b5*x+b6*x**2+b7*x**3)",
    "MGH17": "b1 + b2*exp(-x*b4) + b3*exp(-x*b5)",
    "Roszman1": "b1 - b2*x - arctan(b3/(x-b4))/pi",
    "ENSO": (
        "b1 + b2*cos(2*pi*x/12) + b3*sin(2*pi*x/12) + b5*cos(2*pi*x/b4) + b6*sin(2*pi*x/b4)"
        " + b8*cos(2*pi*x/b7) + b9*sin(2*pi*x/b7)"
    ),
}

_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


@dataclass(frozen=True)
class NistProblem:
    name: str
    names: tuple[str, ...]
    start1: tuple[float, ...]
    start2: tuple[float, ...]
    certified: tuple[float, ...]
    certified_sd: tuple[float, ...]
    ssr: float
    resid_sd: float
    dof: int
    y: NDArray[np.float64]
    x: NDArray[np.float64]  # shape (n,) or (n, k) for several predictors


def read(name: str) -> NistProblem:
    lines = (NIST_DIR / f"{name}.dat").read_text().splitlines()
    names, s1, s2, cert, sd = [], [], [], [], []
    pat = re.compile(rf"^\s*(b\d+)\s*=\s*({_NUM})\s+({_NUM})\s+({_NUM})\s+({_NUM})\s*$")
    ssr = rsd = math.nan
    dof = -1
    data_start = None
    for i, line in enumerate(lines):
        m = pat.match(line)
        if m:
            names.append(m.group(1))
            s1.append(float(m.group(2)))
            s2.append(float(m.group(3)))
            cert.append(float(m.group(4)))
            sd.append(float(m.group(5)))
        elif line.startswith("Residual Sum of Squares:"):
            ssr = float(line.split(":")[1])
        elif line.startswith("Residual Standard Deviation:"):
            rsd = float(line.split(":")[1])
        elif line.startswith("Degrees of Freedom:"):
            dof = int(line.split(":")[1])
        elif line.startswith("Data:") and re.match(r"^Data:\s+y\b", line):
            data_start = i + 1
    assert data_start is not None and names
    rows = [[float(v) for v in ln.split()] for ln in lines[data_start:] if ln.strip()]
    arr = np.array(rows)
    y = arr[:, 0]
    x = arr[:, 1] if arr.shape[1] == 2 else arr[:, 1:]
    return NistProblem(
        name, tuple(names), tuple(s1), tuple(s2), tuple(cert), tuple(sd), ssr, rsd, dof, y, x
    )


def lre(estimate: float, certified: float) -> float:
    """Log relative error: the number of matching significant digits (NIST's measure)."""
    if estimate == certified:
        return 15.0
    if certified == 0.0:
        return float(-math.log10(abs(estimate)))
    return float(-math.log10(abs(estimate - certified) / abs(certified)))
