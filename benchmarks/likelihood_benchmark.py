"""Benchmark of the marginal engine's likelihood: value and gradient per call (prints a table).

Compares the one-Op numba kernel (ped2g.fit.marginal_likelihood_op, what the marginal engine uses) with
the same density as an unrolled graph of elementwise operations (``unrolled_logp`` below, the
form the engine used before the Op), both compiled by PyTensor's numba backend, on random records
with covariances lam_i G + R.

Usage (from the repository root)::

    python benchmarks/likelihood_benchmark.py --records 500 8000 32000 --traits 4
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workflow"))


def unrolled_logp(resid, cov_entry):
    """Per-record normal log-density, the Cholesky unrolled over the k traits as elementwise ops.

    ``resid`` holds k tensors of shape (n,); ``cov_entry(j, l)`` (j >= l) gives entry (j, l) of
    every record's covariance. Cholesky-Banachiewicz (Golub & Van Loan, *Matrix Computations*,
    4th ed., Algorithm 4.2.1), then forward substitution::

        log p(r_i) = -1/2 z_i' z_i - sum_j log L_i[j, j] - (k / 2) log(2 pi),   L_i z_i = r_i
    """
    import pytensor.tensor as pt

    k = len(resid)
    L: dict = {}
    z: list = []
    log_diag = 0.0
    for j in range(k):
        for l in range(j):
            s = cov_entry(j, l)
            for m in range(l):
                s = s - L[j, m] * L[l, m]
            L[j, l] = s / L[l, l]
        d = cov_entry(j, j)
        for m in range(j):
            d = d - L[j, m] ** 2
        L[j, j] = pt.sqrt(d)
        log_diag = log_diag + pt.log(L[j, j])
        zj = resid[j]
        for m in range(j):
            zj = zj - L[j, m] * z[m]
        z.append(zj / L[j, j])
    quad = z[0] ** 2
    for j in range(1, k):
        quad = quad + z[j] ** 2
    return -0.5 * quad - log_diag - 0.5 * float(np.log(2.0 * np.pi)) * k


def _function(kind: str, lam: np.ndarray, k: int):
    import pytensor
    import pytensor.tensor as pt

    from ped2g.fit.marginal_likelihood_op import scaled_pair_logp

    g, r, d = pt.dmatrix("g"), pt.dmatrix("r"), pt.dmatrix("d")
    if kind == "op":
        logp = scaled_pair_logp(d, lam, g, r)
    else:
        logp = unrolled_logp([d[:, j] for j in range(k)], lambda j, l: lam * g[j, l] + r[j, l]).sum()
    return pytensor.function([d, g, r], [logp, *pytensor.grad(logp, [d, g, r])], mode="NUMBA")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--records", type=int, nargs="+", default=[500, 8000, 32000])
    parser.add_argument("--traits", type=int, default=4)
    parser.add_argument("--repeats", type=int, default=200)
    args = parser.parse_args(argv)
    k = args.traits
    rng = np.random.default_rng(0)
    print(f"{'records':>8} {'kind':>9} {'ms/call':>8}")
    for n in args.records:
        lam = rng.uniform(0.1, 3.0, n)
        resid = rng.normal(size=(n, k))
        a = rng.normal(size=(k, k))
        G, R = a @ a.T + np.eye(k), 2.0 * np.eye(k)
        for kind in ("op", "unrolled"):
            f = _function(kind, lam, k)
            f(resid, G, R)                       # compile and warm up
            start = time.perf_counter()
            for _ in range(args.repeats):
                f(resid, G, R)
            print(f"{n:>8} {kind:>9} {1e3 * (time.perf_counter() - start) / args.repeats:>8.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
