"""The files that pass between stages: one module per stage output that later stages read.

fit_folder           ``ped2g fit``: posterior.nc, parameters.csv, diagnostics.json, pedigree_used.csv, ...
breeding_value_null  ``ped2g null``: null_G.nc (read as a :class:`BreedingValueNull`).
refit_null           ``ped2g null-refit``: one netCDF file per population and chunk of replicates.
compare_tables       ``ped2g compare``: one table per method (the method order is defined here),
                     references, loadings, draw checks, draws.nc, summary.json.

Each module names the files, their variables, dimensions and columns, gives the writer a check and
later stages a reader; no stage opens another stage's files except through these.
"""
