"""Write tests/data/params_vectors.json: parameter records as Python writes them, for the page.

Run from the repository root: ``PYTHONPATH=src .venv/bin/python tools/gen_params_vectors.py``.
``tests/test_parameters.py`` rebuilds the same data in memory and compares it with the committed
file, so the file cannot drift from ``Parameter.to_json``; ``js/tests/params.test.ts`` reads it
and checks that js/params.ts reads every ``valid`` list and refuses every ``invalid`` record, as
``Parameter.from_json`` does.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from typing import Any

from curvewright.catalog import catalog
from curvewright.parameters import Parameter, Parameters

OUTPUT = Path(__file__).resolve().parent.parent / "tests" / "data" / "params_vectors.json"


def build() -> dict[str, Any]:
    """The vectors: lists of records Python writes, and single records both sides refuse."""
    mm = catalog()["michaelis_menten"]
    dose = catalog()["inhibition_4pl"]
    valid = {
        "model_defaults": Parameters.for_model(mm).to_json(),
        "shorthand": Parameters.from_shorthand(
            dose,
            start={"log_ic50": -7.0},
            fixed={"full_effect": 0.0},
            bounds={"n_h": (0.2, 5.0), "zero_dose": (None, 150.0)},
            links={"zero_dose": "100 + full_effect"},
        ).to_json(),
        "per_group_and_unset": Parameters(
            [
                Parameter("Vmax", 12.5, 0.0, math.inf, scope="per_group"),
                Parameter("Km", math.nan, 0.0, math.inf),
            ]
        ).to_json(),
    }
    good = Parameter("k", 0.5, 0.0, math.inf).to_json()
    invalid = {
        "unknown_scope": {**good, "scope": "each"},
        "unknown_field": {**good, "colour": "red"},
        "fixed_not_bool": {**good, "fixed": "yes"},
        "link_not_text": {**good, "link": 3},
        "value_text": {**good, "value": "0.5"},
        "no_name": {k: v for k, v in good.items() if k != "name"},
    }
    return {"valid": valid, "invalid": invalid}


def main() -> int:
    """Write the vectors file."""
    OUTPUT.write_text(json.dumps(build(), indent=1, allow_nan=False) + "\n", encoding="utf-8")
    print(f"wrote {OUTPUT}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
