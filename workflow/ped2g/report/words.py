"""Trait combinations and comparison rows in words, for the findings and the figure captions.

A direction in trait space (a unit vector of loadings) is named by the traits that carry most of
it: ``mostly head_width against body_mass`` when the two largest loadings have opposite signs,
``mostly snout_vent with hind_limb`` when they share a sign, ``almost only wing`` when one trait
carries at least :data:`ONE_TRAIT_SHARE` of the squared length. Only the sign pattern and the
relative sizes are used, so a vector and its negative read the same (an axis has no direction).
"""

from __future__ import annotations

from typing import Any

import numpy as np

#: Share of the squared length that makes a direction "almost only" one trait.
ONE_TRAIT_SHARE = 0.8
#: A trait is named when its |loading| is at least this share of the largest |loading|.
NAMED_SHARE = 0.5
MAX_NAMED = 3


def _join(names: list[str]) -> str:
    if len(names) <= 1:
        return "".join(names)
    return ", ".join(names[:-1]) + " and " + names[-1]


def combination_in_words(vector: Any, traits: list[str]) -> str:
    """Name the trait combination of ``vector`` (loadings in the order of ``traits``)."""
    v = np.asarray(vector, dtype=float)
    if v.shape != (len(traits),) or not np.all(np.isfinite(v)) or not np.any(v):
        return "an undetermined combination"
    v = v / np.linalg.norm(v)
    order = np.argsort(-np.abs(v), kind="stable")
    lead = order[0]
    if v[lead] ** 2 >= ONE_TRAIT_SHARE:
        return f"almost only {traits[lead]}"
    large = [k for k in order if abs(v[k]) >= NAMED_SHARE * abs(v[lead])]
    sign = np.sign(v[lead])
    if len(large) == len(traits) and all(np.sign(v[k]) == sign for k in large):
        return "all traits together"
    named = large[:MAX_NAMED]
    same = [traits[k] for k in named if np.sign(v[k]) == sign]
    other = [traits[k] for k in named if np.sign(v[k]) != sign]
    if other:
        return f"mostly {_join(same)} against {_join(other)}"
    return f"mostly {_join(same)} together" if len(same) > 1 else f"mostly {same[0]}"


def ordinal(k: int) -> str:
    """1 -> first, 2 -> second, ... (numbers above ten as 11th, 12th)."""
    words = ["first", "second", "third", "fourth", "fifth", "sixth", "seventh", "eighth", "ninth", "tenth"]
    if 1 <= k <= len(words):
        return words[k - 1]
    suffix = "th" if 10 <= k % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(k % 10, "th")
    return f"{k}{suffix}"


__all__ = ["combination_in_words", "ordinal"]
