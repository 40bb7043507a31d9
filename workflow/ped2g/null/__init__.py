"""The two nulls: G matrices of populations that share one G by construction.

The refitting null (:mod:`.refit`, ``ped2g null-refit`` in :mod:`.refit_command`) simulates
replicate studies on each population's own design under one shared G and refits them like the
data (docs/methods.md §5.6).

The breeding-value null (``ped2g null`` in :mod:`.command`; docs/methods.md §5): for every
retained posterior draw, breeding values are simulated down each population's own pedigree with
that draw's G (:mod:`.pooled_breeding_values`), the phenotyped animals of all populations are
pooled and shuffled into dummy populations of the original sizes (:mod:`.shuffle`), and a null G
is estimated for each dummy population (:mod:`.estimators`); :mod:`.breeding_value_null` runs
these steps chunk by chunk. Its file, ``null_G.nc``, is written and read through
:mod:`ped2g.contracts.breeding_value_null`. Method: Aguirre et al. 2014, Heredity 112:21-29, with
the Mendelian-sampling estimator as an unbiased alternative.
"""
