"""Textbook oracles shared by the tests of several stages (not part of ped2g).

* :func:`tabular_relationship` is the tabular (recursive) method for the additive relationship
  matrix A (Emik & Terrill 1949; Mrode 2014, *Linear Models for the Prediction of Animal Breeding
  Values*, 3rd edn, section 2.2), written as a plain loop so it shares no code with ped2g.
* ``P1_*`` is Mrode's (2014) Table 2.1 six-animal pedigree (docs/methods.md §1.7, P1), positions
  0-based: animals 1, 2 founders; 3 = 1×2; 4 = 1×?; 5 = 4×3; 6 = 5×2 (sire × dam).
"""

from __future__ import annotations

import numpy as np


def tabular_relationship(sire, dam) -> np.ndarray:
    """A by the tabular method: a_jj = 1 + a_sd / 2, a_ij = (a_is + a_id) / 2 for i older than j.

    ``sire`` and ``dam`` are positions (-1 unknown), every parent before its offspring.
    """
    n = len(sire)
    a = np.zeros((n, n))
    for j in range(n):
        s, d = int(sire[j]), int(dam[j])
        a[j, j] = 1.0 + (0.5 * a[s, d] if s >= 0 and d >= 0 else 0.0)
        for i in range(j):
            v = 0.0
            if s >= 0:
                v += 0.5 * a[i, s]
            if d >= 0:
                v += 0.5 * a[i, d]
            a[i, j] = a[j, i] = v
    return a


# Mrode (2014) Table 2.1 pedigree, 0-based positions.
P1_SIRE = np.array([-1, -1, 0, 0, 3, 4])
P1_DAM = np.array([-1, -1, 1, -1, 2, 1])
# Inbreeding: F_5 = F_6 = 0.125 (Mrode 2014 p. 25 uses F_5 = 0.125) [V].
P1_F = np.array([0, 0, 0, 0, 0.125, 0.125])
# A: the block for animals {1, 4, 5} is printed on Mrode (2014) p. 32 [V]; the other entries are
# the textbook's Table 2.1 values as recalled [M], and each also follows by hand from the recursion.
P1_A = np.array([
    [1.0000, 0.0000, 0.5000, 0.5000, 0.5000, 0.2500],
    [0.0000, 1.0000, 0.5000, 0.0000, 0.2500, 0.6250],
    [0.5000, 0.5000, 1.0000, 0.2500, 0.6250, 0.5625],
    [0.5000, 0.0000, 0.2500, 1.0000, 0.6250, 0.3125],
    [0.5000, 0.2500, 0.6250, 0.6250, 1.1250, 0.6875],
    [0.2500, 0.6250, 0.5625, 0.3125, 0.6875, 1.1250],
])
# A = T D T' with T = (I - P)^-1 and D = diag(b), both printed on Mrode (2014) p. 25 [V]
# (d_66 printed as 0.469).
P1_T = np.array([
    [1, 0, 0, 0, 0, 0],
    [0, 1, 0, 0, 0, 0],
    [0.5, 0.5, 1, 0, 0, 0],
    [0.5, 0, 0, 1, 0, 0],
    [0.5, 0.25, 0.5, 0.5, 1, 0],
    [0.25, 0.625, 0.25, 0.25, 0.5, 1],
])
P1_D = np.array([1, 1, 0.5, 0.75, 0.5, 0.46875])
