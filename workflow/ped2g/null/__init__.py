"""The randomisation null: G matrices of dummy populations that share one G by construction.

For every retained posterior draw, breeding values are simulated down each population's own
pedigree with that draw's G (:mod:`.simulate`), the phenotyped animals of all populations are
pooled and shuffled into dummy populations of the original sizes (:mod:`.shuffle`), and a null G
is estimated for each dummy population (:mod:`.estimators`). :mod:`.io` writes and reads
``null_G.nc``; :mod:`.command` is ``ped2g null``. Method: docs/methods.md §5 (Aguirre et al. 2014,
Heredity 112:21-29, with the Mendelian-sampling estimator as an unbiased alternative).
"""
