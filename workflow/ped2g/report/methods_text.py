"""The methods paragraph, the reference list and the cautions of the report.

The paragraph is assembled from what was actually run: the config, the fits' recorded engine,
the comparison tables present and the package versions. Every sentence that depends on a
setting reads that setting; sentences about methods that did not run are left out.
"""

from __future__ import annotations

from typing import Any

#: The in-text citation of nutpie, which has no paper.
NUTPIE = "github.com/pymc-devs/nutpie"
#: Full references, keyed by the short citation used in the text.
REFERENCES: dict[str, str] = {
    "Holm 1979": "Holm S (1979) A simple sequentially rejective multiple test procedure. Scandinavian "
                 "Journal of Statistics 6:65-70.",
    "Morrissey et al. 2019": "Morrissey MB, Hangartner S, Monro K (2019) A note on simulating null "
                             "distributions for G matrix comparisons. Evolution 73:2512-2517 (recalled "
                             "from memory).",
    "Aguirre et al. 2014": "Aguirre JD, Hine E, McGuigan K, Blows MW (2014) Comparing G: multivariate "
                           "analysis of genetic variation in multiple populations. Heredity 112:21-29.",
    "Basser & Pajevic 2007": "Basser PJ, Pajevic S (2007) Spectral decomposition of a 4th-order covariance "
                             "tensor: applications to diffusion tensor MRI. Signal Processing 87:220-236.",
    "Chen & Shao 1999": "Chen M-H, Shao Q-M (1999) Monte Carlo estimation of Bayesian credible and HPD "
                        "intervals. Journal of Computational and Graphical Statistics 8:69-92.",
    "Cheverud 1996": "Cheverud JM (1996) Quantitative genetic analysis of cranial morphology in the "
                     "cotton-top (Saguinus oedipus) and saddle-back (S. fuscicollis) tamarins. Journal of "
                     "Evolutionary Biology 9:5-42.",
    "Cheverud & Marroig 2007": "Cheverud JM, Marroig G (2007) Comparing covariance matrices: random skewers "
                               "method compared to the common principal components model. Genetics and "
                               "Molecular Biology 30:461-469.",
    "Förstner & Moonen 2003": "Förstner W, Moonen B (2003) A metric for covariance matrices. In Grafarend EW "
                              "et al. (eds) Geodesy - the Challenge of the 3rd Millennium. Springer, pp. 299-309.",
    "Hansen & Houle 2008": "Hansen TF, Houle D (2008) Measuring and comparing evolvability and constraint in "
                           "multivariate characters. Journal of Evolutionary Biology 21:1201-1219.",
    "Henderson 1976": "Henderson CR (1976) A simple method for computing the inverse of a numerator "
                      "relationship matrix used in prediction of breeding values. Biometrics 32:69-83.",
    "Henderson 1984": "Henderson CR (1984) Applications of Linear Models in Animal Breeding. University of "
                      "Guelph.",
    "Hine et al. 2009": "Hine E, Chenoweth SF, Rundle HD, Blows MW (2009) Characterizing the evolution of "
                        "genetic variance using genetic covariance tensors. Philosophical Transactions of "
                        "the Royal Society B 364:1567-1578.",
    "Hoffman & Gelman 2014": "Hoffman MD, Gelman A (2014) The No-U-Turn sampler: adaptively setting path "
                             "lengths in Hamiltonian Monte Carlo. Journal of Machine Learning Research "
                             "15:1593-1623.",
    "Houle 1992": "Houle D (1992) Comparing evolvability and variability of quantitative traits. Genetics "
                  "130:195-204.",
    "Kirkpatrick 2009": "Kirkpatrick M (2009) Patterns of quantitative genetic variation in multiple "
                        "dimensions. Genetica 136:271-284.",
    "Krzanowski 1979": "Krzanowski WJ (1979) Between-groups comparison of principal components. Journal of "
                       "the American Statistical Association 74:703-707.",
    "Kruuk 2004": "Kruuk LEB (2004) Estimating genetic parameters in natural populations using the "
                  "'animal model'. Philosophical Transactions of the Royal Society B 359:873-890.",
    "Lewandowski et al. 2009": "Lewandowski D, Kurowicka D, Joe H (2009) Generating random correlation "
                               "matrices based on vines and extended onion method. Journal of Multivariate "
                               "Analysis 100:1989-2001.",
    "Mitteroecker & Bookstein 2009": "Mitteroecker P, Bookstein F (2009) The ontogenetic trajectory of the "
                                     "phenotypic covariance matrix, with examples from craniofacial shape in "
                                     "rats and humans. Evolution 63:727-737.",
    "Tanner & Wong 1987": "Tanner MA, Wong WH (1987) The calculation of posterior distributions by data "
                          "augmentation. Journal of the American Statistical Association 82:528-540.",
    "Quaas 1976": "Quaas RL (1976) Computing the diagonal elements and inverse of a large numerator "
                  "relationship matrix. Biometrics 32:949-953.",
    "Schenker & Gentleman 2001": "Schenker N, Gentleman JF (2001) On judging the significance of differences "
                                 "by examining the overlap between confidence intervals. The American "
                                 "Statistician 55:182-186.",
    "Schluter 1996": "Schluter D (1996) Adaptive radiation along genetic lines of least resistance. "
                     "Evolution 50:1766-1774.",
    "Vehtari et al. 2021": "Vehtari A, Gelman A, Simpson D, Carpenter B, Bürkner P-C (2021) "
                           "Rank-normalization, folding, and localization: an improved R-hat for assessing "
                           "convergence of MCMC. Bayesian Analysis 16:667-718.",
    "Wright 1922": "Wright S (1922) Coefficients of inbreeding and relationship. American Naturalist "
                   "56:330-338.",
    # The software used (docs/methods.md §8); authors, titles and pages recalled from memory [M].
    "Abril-Pla et al. 2023": "Abril-Pla O, Andreani V, Carroll C, et al. (2023) PyMC: a modern and "
                             "comprehensive probabilistic programming framework in Python. PeerJ Computer "
                             "Science 9:e1516.",  # [M]
    "Harris et al. 2020": "Harris CR, Millman KJ, van der Walt SJ, et al. (2020) Array programming with "
                          "NumPy. Nature 585:357-362.",  # [M]
    "Virtanen et al. 2020": "Virtanen P, Gommers R, Oliphant TE, et al. (2020) SciPy 1.0: fundamental "
                            "algorithms for scientific computing in Python. Nature Methods 17:261-272.",  # [M]
    "Kumar et al. 2019": "Kumar R, Carroll C, Hartikainen A, Martin O (2019) ArviZ a unified library for "
                         "exploratory analysis of Bayesian models in Python. Journal of Open Source "
                         "Software 4(33):1143.",  # [M]
    "Mölder et al. 2021": "Mölder F, Jablonski KP, Letcher B, et al. (2021) Sustainable data analysis with "
                          "Snakemake. F1000Research 10:33.",  # [M]
    # nutpie has no paper: its repository, with the version given in the text [M].
    NUTPIE: "nutpie, a No-U-Turn sampler for PyMC models. Software, https://github.com/pymc-devs/nutpie "
            "(no paper; cite the version named in the text).",
}

#: What each comparison method's sentence says and cites (keyed by compare/<method>.csv stem).
METHOD_SENTENCES: dict[str, tuple[str, list[str]]] = {
    "skewers": ("random skewers: the mean vector correlation between the responses Gβ of two populations "
                "to {skewers} unit selection gradients β drawn uniformly on the sphere, one fixed set for "
                "every draw", ["Cheverud 1996", "Cheverud & Marroig 2007"]),
    "subspace": ("Krzanowski's common subspace: the eigenvalues of H = Σ A_i A_i', where A_i holds the "
                 "{subspace_dims} of population i's G", ["Krzanowski 1979",
                                                                              "Aguirre et al. 2014"]),
    "tensor": ("the fourth-order genetic covariance tensor: the variance among populations along each "
               "eigentensor fixed from the posterior-mean G's, with the eigentensors' trait loadings and each "
               "population's coordinates", ["Basser & Pajevic 2007", "Hine et al. 2009", "Aguirre et al. 2014"]),
    "gmax": ("g_max, the leading eigenvector of G, and its angle to the direction of divergence in the "
             "population means", ["Schluter 1996"]),
    "evolvability": ("evolvability, conditional evolvability, respondability and autonomy averaged over "
                     "random unit selection gradients", ["Hansen & Houle 2008"]),
    "dimensions": ("the effective number of dimensions of G, Σλ/λ_1, and the participation ratio "
                   "(Σλ)²/Σλ²", ["Kirkpatrick 2009"]),
    "distance": ("the Riemannian distance between G matrices, sqrt(Σ ln² λ_i) over the eigenvalues of "
                 "G_i⁻¹G_j", ["Förstner & Moonen 2003", "Mitteroecker & Bookstein 2009"]),
}

SCALE_TEXT = {
    "original": "in the traits' original units",
    "variance": "after variance-standardisation (each trait divided by its phenotypic standard deviation, "
                "per draw)",
    "mean": "after mean-standardisation (each trait divided by its mean; Houle 1992)",
}
NULL_ESTIMATOR_TEXT = {
    "mendelian": "from the simulated Mendelian-sampling deviations, which estimates G without bias",
    "sample": "as the sample covariance of the simulated breeding values, which relatedness biases low "
              "by the factor 1 + F̄ − ā",
}


#: References the cautions cite.
CAUTION_REFERENCES = ["Schenker & Gentleman 2001"]


class Citations:
    """Collects the short citations used, in first-use order, for the reference list."""

    def __init__(self) -> None:
        self.used: list[str] = []

    def __call__(self, *keys: str) -> str:
        for key in keys:
            if key not in REFERENCES:
                raise KeyError(f"no reference for {key}")
            if key not in self.used:
                self.used.append(key)
        return "; ".join(keys)

    def references(self) -> list[str]:
        return sorted(REFERENCES[k] for k in self.used)


def _list(items: list[str]) -> str:
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def methods_paragraph(config: dict[str, Any], populations: list[str], traits: list[str],
                      engines: list[str], n_changes: int | None, passed: int, methods: list[str],
                      null_present: bool, versions: dict[str, str],
                      compare_record: dict[str, Any] | None = None, samplers: list[str] | None = None,
                      missing_by_gibbs: bool = False,
                      sample_sizes: list[dict[str, Any]] | None = None) -> tuple[str, list[str]]:
    """The methods paragraph and the references it cites.

    Parameters
    ----------
    engines
        Model engines the fits recorded (``marginal``, ``latent``); empty when not recorded.
    n_changes
        Rows of the pedigree stage's change list (None when it was not found).
    passed
        Number of fits that met every convergence check.
    methods
        The comparison methods whose tables are present (``compare/<method>.csv`` stems).
    compare_record
        ``compare/summary.json``: the number of skewers and subspace dimensions actually used
        (the config's values otherwise).
    samplers
        The samplers the fits recorded as having run (``nutpie``, ``pymc``); the config's
        ``sampling.sampler`` when empty or None.
    missing_by_gibbs
        Whether some fit drew missing trait values by the marginal engine's Gibbs step.
    sample_sizes
        Per population: ``population``, ``records`` (phenotype rows), ``complete`` (rows with
        every trait), ``missing`` (missing trait values) and ``animals`` (pedigree the model used);
        any of them may be absent.
    """
    cite = Citations()
    v = lambda name: versions.get(name, "(version not found)")  # noqa: E731
    s = config["sampling"]
    priors = config["model"]["priors"]
    sentences = []
    change_text = (f" The pedigree stage made {n_changes} change{'s' if n_changes != 1 else ''} to the "
                   "raw pedigree, each listed in the report." if n_changes is not None else "")
    sentences.append(
        f"We analysed {len(traits)} trait{'s' if len(traits) != 1 else ''} ({_list(traits)}) in "
        f"{len(populations)} population{'s' if len(populations) != 1 else ''} ({_list(populations)}) "
        f"with ped2g {v('ped2g')}. The pedigree was checked and ordered with parents before offspring, "
        f"and inbreeding coefficients and the inverse relationship matrix were computed "
        f"({cite('Wright 1922', 'Henderson 1976', 'Quaas 1976')}).{change_text}")
    if sample_sizes:
        def size(r: dict[str, Any]) -> str:
            bits = [f"{r['records']} records" if r.get("records") is not None else None,
                    f"{r['complete']} with every trait" if r.get("complete") is not None else None,
                    f"{r['missing']} missing trait values" if r.get("missing") is not None else None,
                    f"{r['animals']} animals in the pedigree used" if r.get("animals") is not None else None]
            return f"{r['population']}: " + ", ".join(b for b in bits if b)
        sentences.append("Sample sizes were " + "; ".join(size(r) for r in sample_sizes) + ".")
    extra = [f"{r['name']} (grouped by {r['column']})" for r in config["random"]]
    fixed = [f"{k} ({v_})" for k, v_ in config["fixed"].items()]
    engine_text = {"marginal": "with the breeding values integrated out analytically",
                   "latent": "with the breeding values sampled as latent variables",
                   "sparse": "with the breeding values and other random effects integrated out through "
                             "the sparse mixed-model equations"}
    eng = _list([engine_text.get(e, e) for e in engines]) if engines else \
        "(the fits did not record how breeding values were handled)"
    sentences.append(
        f"For each population we fitted a Bayesian multivariate animal model "
        f"({cite('Henderson 1984', 'Kruuk 2004')}), y = Xb + Za + e with a ~ N(0, G ⊗ A) and "
        f"e ~ N(0, R ⊗ I), where A is the additive relationship matrix from the pedigree; the fixed "
        f"effects were {_list(['an intercept per trait', *fixed])}"
        f"{', and further random effects ' + _list(extra) + ' each had their own covariance matrix' if extra else ''}. "
        f"The model was written in PyMC {v('pymc')} ({cite('Abril-Pla et al. 2023')}) {eng}.")
    family = priors["sd_family"].replace("_", "-")
    sentences.append(
        f"Each standard deviation had a {family} prior with scale {priors['sd_scale']} times the "
        f"trait's phenotypic standard deviation, and each correlation matrix an LKJ prior with "
        f"η = {priors['lkj_eta']} ({cite('Lewandowski et al. 2009')}), for G, R and any further "
        f"covariance matrix alike; each fixed effect had an independent normal prior with mean 0 and "
        f"standard deviation {priors['fixed_sd']} on the scale of standardised traits (each "
        "trait centred and divided by its phenotypic standard deviation), that is, nearly flat.")
    names = {"nutpie": lambda: f"nutpie {v('nutpie')} ({cite(NUTPIE)})", "pymc": lambda: f"PyMC {v('pymc')}"}
    sampler = _list([names[x]() if x in names else x for x in (samplers or [s["sampler"]])])
    ch = config["checks"]
    sentences.append(
        f"We ran {s['chains']} chains of the No-U-Turn sampler ({cite('Hoffman & Gelman 2014')}) in "
        f"{sampler}, each with {s['warmup']} warm-up and {s['draws']} kept iterations (target acceptance "
        f"{s['target_accept']}, seed {s['seed']}), and required rank-normalised split R-hat ≤ "
        f"{ch['max_rhat']}, bulk and tail effective sample sizes ≥ {ch['min_ess']} "
        f"({cite('Vehtari et al. 2021')}), computed with ArviZ {v('arviz')} ({cite('Kumar et al. 2019')}), and "
        + ("no divergent transitions" if int(ch['max_divergences']) == 0 else
           f"at most {ch['max_divergences']} divergent transition{'s' if int(ch['max_divergences']) != 1 else ''}")
        + f"; {passed} of {len(populations)} fits met every check.")
    if missing_by_gibbs:
        sentences.append(
            "Records with missing trait values were kept; the missing values were drawn from their exact "
            "conditional distribution by a Gibbs step between NUTS transitions (data augmentation; "
            f"{cite('Tanner & Wong 1987')}).")
    else:
        sentences.append(
            "Records with missing trait values were kept; the missing values were treated as unknowns and "
            "integrated out (exactly in the likelihood, or by sampling them with the other parameters), "
            "never filled in with a single value.")
    mass = config["compare"]["interval_mass"]
    sentences.append(
        f"Posterior distributions are summarised by their median and {mass:.0%} highest posterior "
        f"density (HPD) interval ({cite('Chen & Shao 1999')}).")
    parts = []
    record = compare_record or {}
    k = record.get("subspace_dims") or config["compare"]["subspace_dims"] or max(len(traits) // 2, 1)
    n_skewers = record.get("skewers") or config["compare"]["skewers"]
    for method in methods:
        if method in METHOD_SENTENCES:
            text, refs = METHOD_SENTENCES[method]
            text = text.format(skewers=n_skewers, subspace_dims=f"k = {k} leading eigenvector"
                               + ("s" if k != 1 else ""))
            parts.append(f"{text} ({cite(*refs)})")
    if parts:
        scale = config["compare"]["scale"]
        if scale == "mean":
            cite("Houle 1992")
        sentences.append(
            f"On every posterior draw, and {SCALE_TEXT[scale]}, we computed " + "; ".join(parts) + ".")
    refit = (compare_record or {}).get("refit_null")
    if refit:
        from ..compare.calibrated import READING_RULE

        sentences.append(
            "Whether populations differ by more than estimation noise was judged against a refitting null "
            f"({cite('Morrissey et al. 2019')}): {refit['replicates']} studies were simulated in which every "
            f"population shares one G ({shared_G_text(refit)}), each on that "
            "population's own pedigree, records, missing cells, fixed effects and residual and other "
            "covariances (posterior means), and refitted with the same model, engine and priors "
            f"({refit['chains']} chain(s) of {refit['warmup']} + {refit['draws']} iterations). Each "
            "statistic's posterior mean from the data was compared with its posterior means on the "
            "replicates (a statistic of one population by its distance from the mean over populations; "
            "p = (1 + number of replicates at least as extreme) / (replicates + 1)), and p-values were "
            f"adjusted by Holm's method ({cite('Holm 1979')}) within each family of tests (the rows of "
            "one statistic that differ only in the populations compared). "
            + READING_RULE.format(alpha=float(config["compare"]["alpha"])))
    elif null_present:
        est = config["compare"]["null_model"]["estimator"]
        sentences.append(
            f"Each statistic was set against a randomisation null ({cite('Aguirre et al. 2014')}): for "
            "every posterior draw, breeding values were simulated down each population's pedigree with "
            "that draw's G, the phenotyped animals were randomly reassigned to populations of the original "
            f"sizes, and a null G was estimated per population {NULL_ESTIMATOR_TEXT[est]}; the same "
            "statistics were computed on the null G's. This null carries no error of estimating G and "
            "was used descriptively, not as a test.")
    workflow = ""
    if versions.get("snakemake") and versions["snakemake"] != "not installed":
        workflow = (f" The stages ran as a workflow in Snakemake {v('snakemake')} "
                    f"({cite('Mölder et al. 2021')}).")
    sentences.append(
        f"Computations used Python {v('python')}, NumPy {v('numpy')} ({cite('Harris et al. 2020')}), "
        f"SciPy {v('scipy')} ({cite('Virtanen et al. 2020')}), PyTensor {v('pytensor')} and xarray "
        f"{v('xarray')}.{workflow}")
    return " ".join(sentences), cite.references()


def shared_G_text(refit: dict[str, Any]) -> str:
    """How the refitting null's shared G was made, from compare/summary.json's ``refit_null``."""
    pilots = int(refit.get("pilot_replicates") or 0)
    if pilots == 0:
        return "the mean of the populations' posterior-mean G"
    return ("the mean of the populations' posterior-mean G, corrected for the fit's pull toward the prior: "
            f"with M the mean estimate of {pilots} pilot refits per population simulated under that mean "
            "G_bar, the shared G was G_bar M^-1 G_bar")


#: What simulation says about single G elements at a few hundred records (measured, see README).
RECOVERY_CAUTION = (
    "Each population's posterior of G is shrunk towards the prior when its data are few. Measured on "
    "90 simulated fits at a demo-like design (500 records per population, 4 traits, heritabilities "
    "0.40-0.45, 10% missing values, true genetic correlations up to 0.6; tests/null/refit_calibration.py --truth "
    "--recovery-only, 2 chains x 1,000 draws, the default LKJ(1) prior): posterior means of the "
    "genetic covariances were pulled towards zero by 0.19 posterior SDs on average, variances and "
    "heritabilities by 0.10 SD; 90% equal-tailed intervals covered the true G variances, covariances "
    "and heritabilities in 89%, 89% and 90% of fits, the HPD intervals shown here in 87%, 88% and 87% "
    "(an HPD interval of a skewed quantity such as a variance sits lower than the equal-tailed one). "
    "With pilot refits (compare.null_model.pilot_replicates, 10 by default) the refitting null's shared G "
    "is corrected for this pull. On 40 simulated studies with one shared G (600 records per population, "
    "heritabilities 0.55-0.60; tests/null/refit_calibration.py) 3.8% of its tests had p at or below 0.05 "
    "(mean p 0.53 against 0.51 for an exact test). Statistics of the size of G (magnitude ratios, "
    "evolvability, response sizes) stayed conservative (0-1% flagged), so a size difference near the "
    "threshold is more likely missed than invented. Per-population measures of the shape of G (the share "
    "of g_max, effective dimensions, autonomy, integration, conditional evolvability) were flagged in "
    "7-10% of their tests: a shape difference supported only just (p near 0.05) is weaker evidence than "
    "its p-value says. A single G "
    "element or heritability from a few hundred records can sit well away from the truth.")


def cautions(config: dict[str, Any], failed_fits: list[str], null_present: bool,
             has_null_columns: bool, n_changes: int | None, refit: dict[str, Any] | None = None) -> list[str]:
    """Plain-language cautions for reading the results (assumptions first, then reading rules)."""
    mass = config["compare"]["interval_mass"]
    priors = config["model"]["priors"]
    items = [
        "The animal model is additive: it assumes each trait is the sum of the fixed effects, additive "
        "genetic values, the random effects listed and a residual, all multivariate normal. Dominance, "
        "epistasis, genotype-by-environment interaction and maternal or common-environment effects that "
        "are not in the model are absorbed into G or R; environment shared by relatives (same nest, same "
        "year) that is not modelled inflates G.",
        "Founders and animals with unknown parents are treated as unrelated members of one base "
        "population with the same G; immigrants from a genetically different source break this.",
        f"The priors matter when data are few: {priors['sd_family'].replace('_', '-')} "
        f"priors on the standard deviations with scale {priors['sd_scale']} x the phenotypic SD, and "
        f"LKJ(η = {priors['lkj_eta']}) priors "
        "that pull correlations towards zero. With small pedigrees the posterior of G may largely reflect "
        "these choices; refit with other prior settings before drawing conclusions from weakly informed "
        "elements.",
        "Pedigree errors bias estimates: wrongly assigned parents (for example extra-pair paternity) "
        "make relatives look less alike and bias additive genetic variances and heritabilities downwards. "
        + (f"The pedigree stage made {n_changes} changes (listed in the Data section); check that they "
           "are right for your study." if n_changes else
           "Check the Data section for the changes the pedigree stage made."),
        f"Reading intervals: requiring two {mass:.0%} intervals not to overlap is a much stricter "
        f"criterion than a test at the {1 - mass:.0%} level (Schenker & Gentleman 2001), and overlapping "
        "intervals do not show "
        "that two quantities are equal. "
        + ("Whether populations differ is read from the calibrated p-values (the reading rule in the "
           "Comparisons section), not from overlap." if refit else
           "Use the paired posterior probability (p_obs_gt_null) and the posterior of differences, not "
           "overlap alone."),
        "HPD intervals are single intervals even when a posterior has several modes, are not invariant "
        "to transformation, and for variances piled up near zero they include the boundary.",
        ("Holm's adjustment controls the chance of any false difference within one family of tests, "
         "not across every statistic of the report: the more families are read, the likelier one chance "
         "finding among them." if refit else
         "Many statistics are reported at once; treat them as a description of how the G matrices differ, "
         "not as many independent tests."),
        "Statistics of G depend on the scale of the traits. Variance-standardised comparisons change when "
        "phenotypic (including environmental) variance differs among populations; mean-standardisation is "
        "meaningful only for ratio-scale traits with positive means. Heritability is not evolvability.",
        "Eigenvector-based summaries (g_max, Krzanowski subspaces, eigentensors) are unstable when "
        "eigenvalues are close; their posteriors are then wide and their directions arbitrary.",
    ]
    if refit:
        items.append(
            "The refitting null assumes the fitted model is right for every population (additive "
            "inheritance, normal effects, the fixed and random effects in the config) and replaces each "
            "population's R and fixed effects by their posterior means; under it the p-values are "
            "calibrated, but a model that fits poorly can still make populations look different. "
            "A difference that is not supported is one the data cannot tell from noise; it is not "
            "evidence that the G matrices are equal, and small studies have little power.")
        items.append(RECOVERY_CAUTION)
    elif null_present or has_null_columns:
        items.append(
            "The randomisation null contains no prediction error: its breeding values are simulated "
            "exactly, while the observed G's were estimated from phenotypes. The null is therefore "
            "narrower than it would be if the refitting were included, which makes differences from it "
            "easier to declare (anti-conservative).")
        if config["compare"]["null_model"]["estimator"] == "sample":
            items.append(
                "The null G's were estimated as sample covariances of related animals, which are biased "
                "low by the factor 1 + F̄ − ā; scale-dependent statistics (tensor variances, response "
                "sizes) can then differ between observed and null for that reason alone.")
    else:
        items.append("No randomisation null was found, so the comparisons have no reference for how "
                     "much difference sampling alone would produce.")
    if failed_fits:
        items.insert(0, "Fits of " + _list(failed_fits) + " missed at least one convergence check "
                     "(see Fit diagnostics): do not use their estimates until they have been rerun with "
                     "more iterations or other settings.")
    return items
