"""Write the tiny invented study used by the workflow tests and config/tiny.yaml.

Two populations ('north' and 'south') of an invented bird species, each three generations of
random mating on top of 12 founders, two traits measured on every animal. The numbers are made
up; they exist only to push the whole workflow through quickly, not to check any estimate.

Run from the project folder:  python tests/workflow/make_tiny_data.py tests/data/workflow
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import numpy as np

TRAITS = ("wing", "tarsus")
# True G and R of each population (original units), and trait means.
TRUTH = {
    "north": {"G": [[4.0, 1.2], [1.2, 1.0]], "R": [[4.0, 0.5], [0.5, 1.5]], "mean": [70.0, 20.0]},
    "south": {"G": [[2.0, -0.4], [-0.4, 1.5]], "R": [[4.0, 0.5], [0.5, 1.5]], "mean": [66.0, 21.0]},
}
FOUNDERS = 12
GENERATIONS = 3
PER_GENERATION = 24
SEX_EFFECT = np.array([1.5, 0.3])  # males minus females


def make(out: Path, seed: int = 20261202) -> None:
    rng = np.random.default_rng(seed)
    pedigree_rows = [["bird", "father", "mother"]]
    phenotype_rows = [["bird", "site", "sex", *TRAITS]]
    for code, name in (("N", "north"), ("S", "south")):
        G = np.array(TRUTH[name]["G"])
        R = np.array(TRUTH[name]["R"])
        mean = np.array(TRUTH[name]["mean"])
        chol_g, chol_r = np.linalg.cholesky(G), np.linalg.cholesky(R)
        ids, sexes, values = [], [], []
        for i in range(FOUNDERS):
            ids.append(f"{code}{len(ids) + 1:03d}")
            sexes.append("M" if i % 2 == 0 else "F")
            values.append(chol_g @ rng.standard_normal(2))
            # founders: unknown parents, written with both missing codes the config lists
            pedigree_rows.append([ids[-1], "0", "NA"])
        parents = list(range(FOUNDERS))
        for _ in range(GENERATIONS):
            males = [i for i in parents if sexes[i] == "M"]
            females = [i for i in parents if sexes[i] == "F"]
            born = []
            for k in range(PER_GENERATION):
                sire, dam = rng.choice(males), rng.choice(females)
                # Mendelian sampling variance G/2 (parents taken as non-inbred)
                a = 0.5 * (values[sire] + values[dam]) + chol_g @ rng.standard_normal(2) / np.sqrt(2)
                ids.append(f"{code}{len(ids) + 1:03d}")
                sexes.append("M" if k % 2 == 0 else "F")
                values.append(a)
                born.append(len(ids) - 1)
                pedigree_rows.append([ids[-1], ids[sire], ids[dam]])
            parents = born
        for i, animal in enumerate(ids):
            y = mean + values[i] + chol_r @ rng.standard_normal(2)
            if sexes[i] == "M":
                y = y + SEX_EFFECT
            phenotype_rows.append([animal, name, sexes[i], *(f"{v:.2f}" for v in y)])
    out.mkdir(parents=True, exist_ok=True)
    for file_name, rows in (("pedigree.csv", pedigree_rows), ("phenotypes.csv", phenotype_rows)):
        with open(out / file_name, "w", newline="", encoding="utf-8") as handle:
            csv.writer(handle, lineterminator="\n").writerows(rows)


if __name__ == "__main__":
    make(Path(sys.argv[1] if len(sys.argv) > 1 else "tests/data/workflow"))
