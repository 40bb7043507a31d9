"""Comparisons of G matrices across populations, run on every posterior draw.

One small module per method, each vectorised over leading (draw) axes:

* :mod:`.skewers` - random skewers (Cheverud 1996; Cheverud & Marroig 2007)
* :mod:`.subspace` - Krzanowski's (1979) common subspace
* :mod:`.tensor` - the fourth-order genetic covariance tensor (Basser & Pajevic 2007; Hine et al. 2009)
* :mod:`.gmax` - lines of greatest genetic variation and Schluter's (1996) angle
* :mod:`.evolvability` - the evolvability family (Hansen & Houle 2008)
* :mod:`.dimensions` - effective number of dimensions (Kirkpatrick 2009)
* :mod:`.distance` - Riemannian (Foerstner) distance between matrices
* :mod:`.scale` - original, variance- or mean-standardised matrices
* :mod:`.matrices` - shared helpers (symmetrising, sorted eigen-decomposition, positive definiteness)
* :mod:`.statistics` - every method on a set of G draws, as labelled arrays
* :mod:`.summarise` - tidy per-method tables with intervals and the comparison with the null
* :mod:`.command` - ``ped2g compare``
"""
