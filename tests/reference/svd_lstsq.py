"""Reference SVD and least squares for the FedGrid auditor tests, with NumPy/SciPy (Debian python3-scipy).

Usage: /usr/bin/python3 svd_lstsq.py < input.json
Input: {"rows": m, "cols": n, "a": [row-major m*n], "b": [m]}
Output: {"s": singular values (numpy.linalg.svd), "x": minimum-norm least-squares solution
(scipy.linalg.lstsq, LAPACK gelsd), "rank": numerical rank reported by lstsq}
"""
import json
import sys

import numpy as np
import scipy.linalg

d = json.load(sys.stdin)
a = np.array(d["a"], dtype=float).reshape(d["rows"], d["cols"])
b = np.array(d["b"], dtype=float)
s = np.linalg.svd(a, compute_uv=False)
x, _res, rank, _sv = scipy.linalg.lstsq(a, b, lapack_driver="gelsd")
print(json.dumps({"s": s.tolist(), "x": x.tolist(), "rank": int(rank)}))
