"""The scaling record shared by the size-sweep benchmarks: the least-squares slope of
log(time) over log(size), as one result entry."""

from __future__ import annotations

import numpy as np

#: "near-linear": the exponent the size-sweep benchmarks aim below (issue 11)
NEAR_LINEAR = 1.2


def scaling_result(name: str, medians: dict[int, float]) -> dict:
    """The result entry of a size sweep: ``medians`` maps a state count to its median time
    (s); the ratio is largest over smallest size, the exponent is in ``details``."""
    sizes = sorted(medians)
    slope = float(np.polyfit(np.log(sizes), np.log([medians[n] for n in sizes]), 1)[0])
    return {
        "name": name,
        "median_s": medians[sizes[-1]],
        "reference_median_s": medians[sizes[0]],
        "ratio": medians[sizes[-1]] / medians[sizes[0]],
        "higher_is_better": False,
        "target": f"near-linear: scaling exponent <= {NEAR_LINEAR} from "
        f"{sizes[0]} to {sizes[-1]} states",
        "meets_target": slope <= NEAR_LINEAR,
        "details": {"exponent": slope, "states": sizes},
    }
