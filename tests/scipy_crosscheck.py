"""Independent check of turnbook's fits with scipy.optimize.curve_fit (MINPACK lmder/lmdif).

Reads a JSON list of cases {"model", "x", "y", "start"} from the file named by argv[1] and
prints a JSON list of {"params", "se"} (standard errors from curve_fit's pcov, i.e.
s^2 (J^T J)^-1), in the same order as the cases.
"""
import json
import sys

import numpy as np
from scipy.optimize import curve_fit


def power(x, a0, kd, m):
    return a0 * (1.0 + (m - 1.0) * kd * x) ** (-1.0 / (m - 1.0))


def power_residual(x, a0, a_inf, kd, m):
    # For m < 1 the curve reaches a_inf where 1 + (m - 1) kd x = 0 and stays there, as in
    # turnbook's definition; a trial step of the optimiser may go there.
    u = np.maximum(1.0 + (m - 1.0) * kd * x, 0.0)
    return a_inf + (a0 - a_inf) * u ** (-1.0 / (m - 1.0))


MODELS = {
    "linear": lambda x, a0, r: a0 - r * x,
    "first-order": lambda x, a0, kd: a0 * np.exp(-kd * x),
    "first-order-residual": lambda x, a0, a_inf, kd: a_inf + (a0 - a_inf) * np.exp(-kd * x),
    "second-order": lambda x, a0, kd: a0 / (1.0 + kd * x),
    "power": power,
    "power-residual": power_residual,
    "two-site": lambda x, a_inf, a1, k1, a2, k2: a_inf + a1 * np.exp(-k1 * x) + a2 * np.exp(-k2 * x),
    "plateau": lambda x, ton_max, kd: ton_max * (1.0 - np.exp(-kd * x)),
}


def main():
    with open(sys.argv[1], encoding="utf-8") as fh:
        cases = json.load(fh)
    out = []
    for case in cases:
        f = MODELS[case["model"]]
        x = np.asarray(case["x"], dtype=float)
        y = np.asarray(case["y"], dtype=float)
        popt, pcov = curve_fit(
            f, x, y, p0=case["start"], method="lm",
            ftol=1e-15, xtol=1e-15, gtol=1e-15, maxfev=200000,
        )
        out.append({
            "params": [float(v) for v in popt],
            "se": [float(v) for v in np.sqrt(np.diag(pcov))],
        })
    print(json.dumps(out))


if __name__ == "__main__":
    main()
