"""Mrode (2014) beef-calf example (Table 5.1, pedigree of Example 3.1) as test fixtures.

Source: R.A. Mrode, *Linear Models for the Prediction of Animal Breeding Values*, 3rd ed.
(2014), Table 5.1 and the solutions table on p. 74 (values as reproduced in the project's
docs/methods.md §2.10, checked there against the book). The bivariate G and R are marked there
as recalled from memory [M] but agree with the book's printed intermediate blocks.
"""

import numpy as np
import pandas as pd

from ped2g.config import validate
from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.relationships import inbreeding

# calf, sex, sire, dam, WWG, PWG (Mrode 2014, Table 5.1)
CALVES = [("4", "M", "1", "", 4.5, 6.8), ("5", "F", "3", "2", 2.9, 5.0), ("6", "F", "1", "2", 3.9, 6.8),
          ("7", "M", "4", "5", 3.5, 6.0), ("8", "M", "3", "6", 5.0, 7.5)]

# Solutions, Mrode (2014) p. 74: male, female, animals 1..8.
SOLUTIONS = {
    "E3": {"WWG": [4.361, 3.397, 0.151, -0.015, -0.078, -0.010, -0.270, 0.276, -0.316, 0.244],
           "PWG": [6.800, 5.880, 0.280, -0.008, -0.170, -0.013, -0.478, 0.517, -0.479, 0.392]},
    "E1": {"WWG": [4.358, 3.404, 0.098, -0.019, -0.041, -0.009, -0.186, 0.177, -0.249, 0.183]},
    "E2": {"PWG": [6.798, 5.879, 0.277, -0.005, -0.171, -0.013, -0.471, 0.514, -0.464, 0.384]},
}
COVARIANCES = {
    "E3": ([[20.0, 18.0], [18.0, 40.0]], [[40.0, 11.0], [11.0, 30.0]]),
    "E1": ([[20.0]], [[40.0]]),
    "E2": ([[40.0]], [[30.0]]),
}


def pedigree() -> Pedigree:
    """Pedigree P2: 1-3 founders; 4 = 1 x ?; 5 = 3 x 2; 6 = 1 x 2; 7 = 4 x 5; 8 = 3 x 6."""
    ids = np.array([str(i) for i in range(1, 9)], dtype=object)
    sire = np.array([-1, -1, -1, 0, 2, 0, 3, 2])
    dam = np.array([-1, -1, -1, -1, 1, 1, 4, 5])
    generation = np.array([0, 0, 0, 1, 1, 1, 2, 2])
    return Pedigree(ids=ids, sire=sire, dam=dam, generation=generation, inbreeding=inbreeding(sire, dam))


def phenotypes() -> pd.DataFrame:
    frame = pd.DataFrame([(c, s, str(w), str(p)) for c, s, _, _, w, p in CALVES],
                         columns=["calf", "sex", "WWG", "PWG"])
    frame["herd"] = "demo"
    frame.index = pd.Index(range(2, 2 + len(frame)), name="line")
    return frame


def config(example: str) -> dict:
    traits = list(SOLUTIONS[example])
    G, R = COVARIANCES[example]
    return validate({
        "data": {"columns": {"id": "calf", "population": "herd"}},
        "traits": traits,
        "fixed": {"sex": "categorical"},
        "model": {"priors": {"fixed_sd": 1.0e4}, "fixed_covariances": {"G": G, "R": R}},
    })


def assert_matches_solutions(data, beta, bv, example: str, atol: float = 1e-3) -> None:
    """Compare standardised-scale solutions with Mrode's (2014) p. 74 table for ``example``.

    ``beta`` is (p, t) with rows named by ``data.x_names`` (intercept = female, plus
    ``sex[M]``); ``bv`` is (n_animals, t) in pedigree order. Both are put back into original units
    and laid out as the book's rows: male, female, animals 1..8.
    """
    female = data.y_center + data.y_scale * beta[0]
    male = female + data.y_scale * beta[data.x_names.index("sex[M]")]
    bv = bv * data.y_scale
    order = [data.pedigree.index[str(i)] for i in range(1, 9)]
    for j, trait in enumerate(data.traits):
        got = np.concatenate([[male[j], female[j]], bv[order, j]])
        np.testing.assert_allclose(got, SOLUTIONS[example][trait], atol=atol, err_msg=trait)
