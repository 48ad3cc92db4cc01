#!/usr/bin/python3
"""Independent AC power flow for FedGrid feeder files (outside check of FedGrid's sweep).

Newton-Raphson on the bus power mismatch equations in polar form, with the bus admittance
matrix and Jacobian assembled as scipy.sparse matrices and each Newton step solved with
scipy.sparse.linalg.spsolve. It shares nothing with FedGrid's backward/forward sweep except
the feeder file it reads (format "fedgrid-feeder", version 1).

Usage: /usr/bin/python3 ac_power_flow.py FEEDER.json [--repeat N]
Prints one JSON object: converged, iterations, maxMismatchPu, lossKw, substationImportKw,
buses [{id, vmPu, vaRad}] and, with --repeat N, medianMs (median wall time of N solves,
admittance matrix built once beforehand, measured inside this process).
"""
import json
import math
import sys
import time

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla


def load(path):
    with open(path, encoding="utf-8") as f:
        doc = json.load(f)
    if doc.get("format") != "fedgrid-feeder" or doc.get("version") != 1:
        raise SystemExit(f"{path}: not a fedgrid-feeder version 1 file")
    return doc


def build(doc):
    base_mva = float(doc["baseMva"])
    ids = [b["id"] for b in doc["buses"]]
    index = {bid: i for i, bid in enumerate(ids)}
    n = len(ids)
    kv = np.array([float(b["baseKv"]) for b in doc["buses"]])
    p = np.array([float(b.get("loadKw", 0.0)) for b in doc["buses"]]) / (1000.0 * base_mva)
    q = np.array([float(b.get("loadKvar", 0.0)) for b in doc["buses"]]) / (1000.0 * base_mva)
    rows, cols, vals = [], [], []
    for line in doc["lines"]:
        f, t = index[line["from"]], index[line["to"]]
        zbase = kv[f] ** 2 / base_mva
        y = 1.0 / complex(float(line["rOhm"]) / zbase, float(line["xOhm"]) / zbase)
        rows += [f, t, f, t]
        cols += [f, t, t, f]
        vals += [y, y, -y, -y]
    ybus = sp.csr_matrix((np.array(vals, dtype=complex), (rows, cols)), shape=(n, n))
    slack = index[doc["substation"]["bus"]]
    v0 = float(doc["substation"]["voltagePu"])
    # Specified injections: loads are consumption, so injection is minus the load.
    s_spec = -(p + 1j * q)
    return ids, ybus, slack, v0, s_spec, base_mva


def newton(ybus, slack, v0, s_spec, tol=1e-12, max_iter=30):
    n = ybus.shape[0]
    pq = np.array([i for i in range(n) if i != slack])
    vm = np.ones(n)
    va = np.zeros(n)
    vm[slack] = v0
    m = len(pq)
    mismatch = float("inf")
    for it in range(max_iter + 1):
        v = vm * np.exp(1j * va)
        ibus = ybus @ v
        s_calc = v * np.conj(ibus)
        d = s_calc - s_spec
        f = np.concatenate([d.real[pq], d.imag[pq]])
        mismatch = float(np.max(np.abs(f))) if m else 0.0
        if mismatch < tol:
            return vm, va, True, it, mismatch
        if it == max_iter or not np.isfinite(mismatch):
            break
        # dS/dVa and dS/dVm (polar form) as sparse matrices.
        dv = sp.diags(v)
        di = sp.diags(ibus)
        vnorm = sp.diags(v / np.abs(v))
        ds_dva = 1j * dv @ np.conj(di - ybus @ dv)
        ds_dvm = dv @ np.conj(ybus @ vnorm) + np.conj(di) @ vnorm
        ds_dva = sp.csr_matrix(ds_dva)[pq][:, pq]
        ds_dvm = sp.csr_matrix(ds_dvm)[pq][:, pq]
        jac = sp.bmat([[ds_dva.real, ds_dvm.real], [ds_dva.imag, ds_dvm.imag]], format="csc")
        dx = spla.spsolve(jac, -f)
        va[pq] += dx[:m]
        vm[pq] += dx[m:]
    return vm, va, False, it, mismatch


def main(argv):
    if len(argv) < 2:
        raise SystemExit(__doc__)
    path = argv[1]
    repeat = 0
    if "--repeat" in argv:
        repeat = int(argv[argv.index("--repeat") + 1])
    doc = load(path)
    ids, ybus, slack, v0, s_spec, base_mva = build(doc)
    vm, va, ok, it, mism = newton(ybus, slack, v0, s_spec)
    v = vm * np.exp(1j * va)
    s_inj = v * np.conj(ybus @ v)
    loss_kw = float(np.sum(s_inj.real)) * 1000.0 * base_mva
    out = {
        "converged": bool(ok),
        "iterations": int(it),
        "maxMismatchPu": mism,
        "lossKw": loss_kw,
        "substationImportKw": float(s_inj[slack].real) * 1000.0 * base_mva,
        "buses": [{"id": ids[i], "vmPu": float(vm[i]), "vaRad": float(va[i])} for i in range(len(ids))],
    }
    if repeat > 0:
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            newton(ybus, slack, v0, s_spec)
            times.append((time.perf_counter() - t0) * 1000.0)
        times.sort()
        out["medianMs"] = times[len(times) // 2] if len(times) % 2 else 0.5 * (times[len(times) // 2 - 1] + times[len(times) // 2])
        out["repeat"] = repeat
    json.dump(out, sys.stdout)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main(sys.argv)
