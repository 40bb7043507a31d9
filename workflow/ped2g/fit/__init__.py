"""The fit stage: a Bayesian multivariate animal model per population, in PyMC."""
