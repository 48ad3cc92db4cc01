#!/usr/bin/python3
"""Outside check for FedGrid's cone solver: solves cone programs in FedGrid's exchange format
(see README, "Safety projection") with CVXOPT (Debian package python3-cvxopt).

usage: /usr/bin/python3 tests/reference/cone_reference.py [--mode qp|feasibility] [--repeat N] FILE...

--mode qp           solve minimise 1/2 x'Px + q'x + c0 s.t. Ax = b, Gx + s = h, s in K with
                    cvxopt.solvers.coneqp (the default).
--mode feasibility  decide feasibility with cvxopt.solvers.conelp on the same constraints and a
                    zero objective (conelp's homogeneous embedding returns a certificate of primal
                    infeasibility where coneqp would stop with a numerical error).
Prints one JSON array on stdout: per file {file, status, objective, x, iterations, medianMs}, with
status one of "optimal", "primal-infeasible", "dual-infeasible", "unknown". medianMs is the median
wall time of the solver call alone (no start-up, no file reading) over N repetitions, for the
accepted run (see the comment in solve() on tolerances).
"""
import json
import sys
import time

import cvxopt
from cvxopt import matrix, solvers, spmatrix


def sparse(m, symmetric_upper=False):
    i, j, v = list(m["i"]), list(m["j"]), list(m["v"])
    if symmetric_upper:
        for a, b, c in zip(m["i"], m["j"], m["v"]):
            if a != b:
                i.append(b)
                j.append(a)
                v.append(c)
    return spmatrix(v, i, j, (m["rows"], m["cols"]), "d")


def solve(path, mode, repeat):
    with open(path) as f:
        d = json.load(f)
    n = d["n"]
    P = sparse(d["P"], symmetric_upper=True)
    q = matrix(d["q"], (n, 1), "d")
    G = sparse(d["G"])
    h = matrix(d["h"], (len(d["h"]), 1), "d")
    dims = {"l": d["dims"]["l"], "q": list(d["dims"]["q"]), "s": []}
    has_eq = d["A"]["rows"] > 0
    A = sparse(d["A"]) if has_eq else None
    b = matrix(d["b"], (len(d["b"]), 1), "d") if has_eq else None
    # Aim at 1e-11. coneqp often stops there with status "unknown" (no further progress) at an
    # iterate that is nevertheless far more accurate than its "optimal" at 1e-9; such an iterate is
    # accepted as optimal when CVXOPT's own relative gap is at most 1e-9 and its primal and dual
    # infeasibilities at most 1e-7 (reported as accepted="residuals"). Otherwise looser tolerances
    # are tried in turn until coneqp reports "optimal".
    tolerances = [1e-11, 1e-10, 1e-9, 3e-9, 1e-8] if mode == "qp" else [1e-8]
    accepted = None
    for tol in tolerances:
        solvers.options.update({"show_progress": False, "abstol": tol, "reltol": tol, "feastol": tol, "maxiters": 200})
        times = []
        sol = None
        for _ in range(repeat):
            t0 = time.perf_counter()
            if mode == "feasibility":
                sol = solvers.conelp(matrix(0.0, (n, 1)), G, h, dims, A, b)
            else:
                sol = solvers.coneqp(P, q, G, h, dims, A, b)
            times.append((time.perf_counter() - t0) * 1000.0)
        if sol["status"] != "unknown":
            accepted = "status"
            break
        if mode == "qp" and sol["x"] is not None and sol.get("gap") is not None:
            pc = abs(sol["primal objective"] or 0.0) + abs(d.get("objectiveConstant", 0.0))
            if (sol["gap"] <= 1e-9 * max(1.0, pc) and (sol["primal infeasibility"] or 1) <= 1e-7
                    and (sol["dual infeasibility"] or 1) <= 1e-7):
                accepted = "residuals"
                break
    times.sort()
    status = {"optimal": "optimal", "primal infeasible": "primal-infeasible",
              "dual infeasible": "dual-infeasible"}.get(sol["status"], "unknown")
    if accepted == "residuals":
        status = "optimal"
    x = list(sol["x"]) if sol["x"] is not None else None
    obj = None
    if x is not None and mode == "qp":
        xm = sol["x"]
        obj = 0.5 * (xm.T * P * xm)[0] + (q.T * xm)[0] + d.get("objectiveConstant", 0.0)
    return {"file": path, "status": status, "cvxoptStatus": sol["status"], "objective": obj, "x": x,
            "iterations": sol.get("iterations"), "tolerance": tol, "accepted": accepted, "medianMs": times[len(times) // 2]}


def main(argv):
    mode, repeat, files = "qp", 1, []
    k = 0
    while k < len(argv):
        if argv[k] == "--mode":
            mode = argv[k + 1]
            k += 2
        elif argv[k] == "--repeat":
            repeat = int(argv[k + 1])
            k += 2
        else:
            files.append(argv[k])
            k += 1
    if mode not in ("qp", "feasibility") or not files:
        sys.stderr.write(__doc__)
        return 2
    out = [solve(f, mode, repeat) for f in files]
    json.dump(out, sys.stdout)
    sys.stdout.write("\n")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
