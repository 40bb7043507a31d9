"""pedigree.csv round trip through Pedigree.write_csv / Pedigree.read_csv."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from ped2g.pedigree.core import Pedigree
from pedigree_oracles import make_pedigree, random_parents


def test_round_trip_keeps_ids_parents_and_inbreeding(tmp_path):
    rng = np.random.default_rng(7)
    sire, dam = random_parents(rng, 60, 0.3, selfing=True)
    # ids that a careless reader would mangle: leading zeros, case, "NA"-like text
    names = [f"0{k:03d}" if k % 3 else f"Ab{k}" for k in range(60)]
    names[5] = "nan"
    ped = make_pedigree([(names[k], names[s] if s >= 0 else None, names[d] if d >= 0 else None)
                         for k, (s, d) in enumerate(zip(sire, dam))])
    ped.write_csv(tmp_path / "pedigree.csv")
    back = Pedigree.read_csv(tmp_path / "pedigree.csv")
    assert list(back.ids) == names
    np.testing.assert_array_equal(back.sire, ped.sire)
    np.testing.assert_array_equal(back.dam, ped.dam)
    np.testing.assert_array_equal(back.generation, ped.generation)
    np.testing.assert_allclose(back.inbreeding, ped.inbreeding, rtol=1e-9)


def test_from_frame_refuses_unknown_parent_and_repeated_id():
    frame = pd.DataFrame({"id": ["a", "b"], "sire": ["", "x"], "dam": ["", ""],
                          "generation": [0, 1], "inbreeding": [0.0, 0.0]})
    with pytest.raises(KeyError, match="sire 'x' is not an id"):
        Pedigree.from_frame(frame)
    frame = pd.DataFrame({"id": ["a", "a"], "sire": ["", ""], "dam": ["", ""],
                          "generation": [0, 0], "inbreeding": [0.0, 0.0]})
    with pytest.raises(ValueError, match="id 'a' more than once"):
        Pedigree.from_frame(frame)
