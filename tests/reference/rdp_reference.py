#!/usr/bin/python3
"""Independent reference for the Renyi DP accountant (run with Debian's /usr/bin/python3 and python3-scipy).

  rdp_reference.py rdp Q SIGMA ORDER[,ORDER...]   -> JSON [{"order": a, "rdp": eps}, ...]
  rdp_reference.py logerfc X[,X...]               -> JSON [{"x": x, "logErfc": v}, ...]

RDP of the sampled Gaussian mechanism at order a: log(A_a)/(a - 1) with
  A_a = integral over z of N(z; 0, s^2) * ((1 - q) + q * exp((2z - 1)/(2 s^2)))^a dz,
the Renyi divergence of the mixture (1-q) N(0, s^2) + q N(1, s^2) from N(0, s^2), integrated numerically with
scipy.integrate.quad in log-shifted form (no closed form or series is used here).
"""
import json
import math
import sys

import numpy as np
from scipy import integrate, special


def log_integrand(z, q, s, a):
    log_normal = -z * z / (2 * s * s) - math.log(s * math.sqrt(2 * math.pi))
    t = (2 * z - 1) / (2 * s * s)
    # log((1-q) + q e^t), stable for large |t|
    log_ratio = np.logaddexp(math.log1p(-q), math.log(q) + t)
    return log_normal + a * log_ratio


def rdp(q, s, a):
    lo, hi = -40.0 * s, a + 40.0 * s
    grid = np.linspace(lo, hi, 40001)
    values = np.array([log_integrand(z, q, s, a) for z in grid])
    peak = float(values.max())
    # breakpoints: where the shifted integrand is not negligible, so quad sees every mode
    alive = grid[values - peak > -60]
    points = list(np.linspace(alive.min(), alive.max(), 41))
    f = lambda z: math.exp(log_integrand(z, q, s, a) - peak)
    total = 0.0
    for x0, x1 in zip(points[:-1], points[1:]):
        part, _ = integrate.quad(f, x0, x1, epsabs=0.0, epsrel=1e-13, limit=400)
        total += part
    log_a = peak + math.log(total)
    return log_a / (a - 1)


def log_erfc(x):
    if x > 0:
        return math.log(special.erfcx(x)) - x * x
    return math.log(special.erfc(x))


def main(argv):
    if len(argv) >= 4 and argv[0] == "rdp":
        q, s = float(argv[1]), float(argv[2])
        orders = [float(a) for a in argv[3].split(",")]
        print(json.dumps([{"order": a, "rdp": rdp(q, s, a)} for a in orders]))
        return 0
    if len(argv) >= 2 and argv[0] == "logerfc":
        xs = [float(x) for x in argv[1].split(",")]
        print(json.dumps([{"x": x, "logErfc": log_erfc(x)} for x in xs]))
        return 0
    print(__doc__, file=sys.stderr)
    return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
