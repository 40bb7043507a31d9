"""Seconds per refit of the refitting null (prints a table; never fails).

For each pedigree size n, one simulated design (benchmarks/fit_benchmark.py's: 4 traits, 80% of
animals recorded, 10% of trait values missing, a sex effect) is refitted ``--replicates`` times
as the workflow's null-refit jobs do (ped2g.null.refit.Refitter with the default
compare.null_model.refit settings: 1 chain of 150 + 300 iterations): records simulated under one
G on the design, standardised, and fitted by the marginal engine, whose eigendecomposition is
computed once. Reported: the one-off setup (eigendecomposition) and compile seconds, then the
median seconds per refit and the route for missing values (``nuts``: compiled once, records
swapped in; ``gibbs``: a model per replicate), and the median smallest bulk ESS over G.

Usage (from the repository root)::

    python benchmarks/refit_benchmark.py --sizes 500 2000 8000 --replicates 5
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))


def main(argv=None) -> int:
    from fit_benchmark import simulate_data

    from ped2g.config import validate
    from ped2g.fit import marginal
    from ped2g.null.refit import DesignParameters, Refitter, simulate_records
    from ped2g.rng import generator

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[500, 2000, 8000])
    parser.add_argument("--replicates", type=int, default=5)
    parser.add_argument("--traits", type=int, default=4)
    args = parser.parse_args(argv)
    config = validate({"traits": [f"trait_{j + 1}" for j in range(args.traits)]})
    print(f"{'n':>6} {'records':>8} {'route':>6} {'setup_s':>8} {'compile_s':>9} {'s/refit':>8} "
          f"{'minESS_G':>8}", flush=True)
    for n in args.sizes:
        data, G, R = simulate_data(n, args.traits, seed=1)
        start = time.perf_counter()
        refitter = Refitter(data, "marginal", config)
        setup = refitter.engine.rotation(data).seconds     # computed once, inside the Refitter
        compile_s = time.perf_counter() - start - setup
        s = data.y_scale
        params = DesignParameters(mu=np.zeros((data.n_records, data.n_traits)), R=R * np.outer(s, s))
        times, ess = [], []
        for r in range(args.replicates):
            Y = simulate_records(data, G * np.outer(s, s), params, generator(1, "refit-benchmark", n, r))
            rep = refitter.refit(Y, f"bench:{n}:{r}")
            times.append(rep.seconds)
            ess.append(rep.ess_bulk_min)
        route = marginal.missing_mode(data, config["model"])
        print(f"{n:>6} {data.n_records:>8} {route:>6} {setup:>8.1f} {compile_s:>9.1f} "
              f"{np.median(times):>8.2f} {np.median(ess):>8.0f}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
