"""Running NUTS on an engine's model: nutpie (numba backend, the default) or PyMC's own sampler.

When an engine adds step methods of its own (the marginal engine's Gibbs step for missing trait
values), the run uses PyMC's sampler -- nutpie has no compound steps -- with NUTS compiled by
PyTensor's numba backend, and each chain starts from its own point, jittered by U(-1, 1) on the
unconstrained scale as PyMC's default initialisation does.

The sampler seed comes from the run seed through :func:`ped2g.rng.seed_sequence` with the names
``("fit", population, "sampler")``, so each population's chains are reproducible and independent
of the order in which populations are fitted. On a terminal, progress is shown by the sampler's own
progress bar. Where stderr is not a terminal (a log file, a cluster job) or the bar is turned off,
:class:`ProgressLog` writes a line to the log every :data:`PROGRESS_INTERVAL` seconds instead:
phase (warm-up or sampling), iteration, draws per second, divergent transitions so far and the
time left at the rate so far. nutpie reports its chains' state to a callback several times a
second (its template progress type, fed to the sampler through :class:`_NutpieProgress`); PyMC's
sampler calls back after every draw.
"""

from __future__ import annotations

import logging
import os
import sys
import time
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..config import with_defaults
from ..errors import UserError
from ..machine import available_cpus
from ..rng import seed_sequence

SAMPLERS = ("nutpie", "pymc")

#: Seconds between two progress lines in the log when stderr is not a terminal.
PROGRESS_INTERVAL = 30.0

#: What nutpie's template progress renders per update: total iterations done, then per chain
#: iterations done, whether it is still in warm-up, divergent transitions (warm-up included).
_NUTPIE_PROGRESS_TEMPLATE = ("{{ total_finished_draws }}|{% for chain in chains %}"
                             "{{ chain.finished_draws }},{{ chain.tuning }},{{ chain.divergences }};{% endfor %}")


def _duration(seconds: float) -> str:
    seconds = max(0, int(round(seconds)))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    if h:
        return f"{h} h {m} min"
    if m:
        return f"{m} min {s} s"
    return f"{s} s"


class ProgressLog:
    """One log line per ``interval`` seconds while a sampler runs.

    Call :meth:`update` as often as the sampler reports (each call is cheap); a line is written
    when ``interval`` seconds have passed since the last one (or since the start)::

        population north: warm-up, iteration 350 of 2000 (slowest of 4 chains), 41.2 draws/s,
        0 divergent transitions so far (warm-up included), about 2 min 10 s left

    Draws per second count every chain's iterations (warm-up included) over the wall time since
    the sampler's first report (so compilation is not counted); the time left is the iterations
    still to do at that rate.
    """

    def __init__(self, log: logging.Logger, label: str, chains: int, warmup: int, draws: int,
                 interval: float = PROGRESS_INTERVAL, clock=time.monotonic):
        self.log = log
        self.label = label
        self.chains = chains
        self.per_chain = warmup + draws
        self.interval = float(interval)
        self.clock = clock
        self.start: float | None = None     # the sampler's first report
        self.last = 0.0
        self.lines = 0
        self.done = np.zeros(chains, dtype=np.int64)
        self.tuning = np.ones(chains, dtype=bool)
        self.divergences = np.zeros(chains, dtype=np.int64)

    def update(self) -> None:
        """Write a line if ``interval`` seconds have passed since the last one."""
        now = self.clock()
        if self.start is None:
            self.start = self.last = now
            return
        if now - self.last < self.interval:
            return
        self.last = now
        elapsed = now - self.start
        total = int(self.done.sum())
        rate = total / elapsed if elapsed > 0 else 0.0
        left = self.chains * self.per_chain - total
        eta = f"about {_duration(left / rate)} left" if rate > 0 else "time left not known yet"
        phase = "warm-up" if self.tuning.any() else "sampling"
        self.lines += 1
        self.log.info("%s: %s, iteration %d of %d (slowest of %d chains), %.1f draws/s, %d divergent "
                      "transitions so far (warm-up included), %s", self.label, phase, int(self.done.min()),
                      self.per_chain, self.chains, rate, int(self.divergences.sum()), eta)

    def nutpie_callback(self, formatted: str) -> None:
        """Read the state nutpie rendered with :data:`_NUTPIE_PROGRESS_TEMPLATE`."""
        try:
            chains = [c.split(",") for c in formatted.split("|", 1)[1].split(";") if c]
            for i, (done, tuning, divergences) in enumerate(chains[:self.chains]):
                self.done[i] = int(done)
                self.tuning[i] = tuning.strip() == "true"
                self.divergences[i] = int(divergences)
        except (IndexError, ValueError):
            return        # an unexpected rendering: keep the last state
        self.update()

    def pymc_callback(self, trace, draw) -> None:
        """PyMC's ``callback(trace=..., draw=...)``, called after every draw of every chain."""
        c = int(draw.chain) % self.chains
        self.done[c] = int(draw.draw_idx) + 1
        self.tuning[c] = bool(draw.tuning)
        stats = draw.stats if isinstance(draw.stats, (list, tuple)) else [draw.stats]
        self.divergences[c] += int(any(bool(st.get("diverging", False)) for st in stats if isinstance(st, dict)))
        self.update()


def stderr_is_terminal() -> bool:
    """Whether the sampler's own progress bar can be seen."""
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


class _NutpieProgress:
    """A compiled nutpie model whose sampler reports progress to ``callback``.

    ``nutpie.sample`` builds its sampler through the compiled model's ``_make_sampler`` with a
    progress type that draws a terminal bar (hidden when stderr is not a terminal); this wrapper
    passes nutpie's template progress type instead, which renders
    :data:`_NUTPIE_PROGRESS_TEMPLATE` every ``rate_ms`` milliseconds and hands the text to
    ``callback``. Everything else is the compiled model's own (nutpie >= 0.16, < 0.17).
    """

    def __init__(self, compiled, callback, rate_ms: int):
        self._compiled = compiled
        self._callback = callback
        self._rate_ms = rate_ms

    def __getattr__(self, name):
        return getattr(self._compiled, name)

    def _make_sampler(self, settings, init_mean, cores, progress_type, store):
        from nutpie import _lib

        progress = _lib.ProgressType.template_callback(self._rate_ms, _NUTPIE_PROGRESS_TEMPLATE, cores,
                                                       self._callback)
        return self._compiled._make_sampler(settings, init_mean, cores, progress, store)


@dataclass
class SamplingRun:
    """The draws and what it took to get them.

    Attributes
    ----------
    idata : arviz.InferenceData
        Posterior draws (warm-up removed) and sample_stats.
    info : dict
        sampler, seed, chains, warmup, draws, target_accept, compile_seconds, sampling_seconds,
        gradient_evaluations (warm-up included), divergences (kept draws), seconds_per_gradient
        (sampling wall time x parallel chains / gradient evaluations: includes sampler overhead
        and is inflated when other jobs share the cores).
    """

    idata: Any
    info: dict[str, Any] = field(default_factory=dict)


def sampler_seed(seed: int, population: str) -> int:
    """A 32-bit seed for the sampler of one population, derived from the run seed."""
    return int(seed_sequence(seed, "fit", population, "sampler").generate_state(1)[0])


def _count(idata, group: str, stat: str) -> int:
    if group not in idata.groups() or stat not in idata[group]:
        return 0
    return int(np.asarray(idata[group][stat].values).sum())


def _jittered_starts(model, free, chains: int, seed: int) -> list[dict]:
    """One start per chain: the model's initial point with U(-1, 1) jitter on the NUTS variables
    (unconstrained scale), returned as initial values of the random variables."""
    from pymc.initial_point import make_initial_point_fns_per_chain

    fns = make_initial_point_fns_per_chain(model=model, overrides=None, jitter_rvs=set(free), chains=chains)
    to_rv = model.compile_fn(model.replace_rvs_by_values(list(free)), inputs=model.value_vars,
                             on_unused_input="ignore", point_fn=True)
    seeds = np.random.SeedSequence(seed).generate_state(chains)
    starts = []
    for fn, s in zip(fns, seeds):
        point = fn(int(s))
        values = to_rv(point)
        starts.append({rv.name: v for rv, v in zip(free, values)})
    return starts


@contextmanager
def _environment(name: str, value: str):
    """Set the environment variable ``name`` to ``value`` inside the block; restore it after."""
    before = os.environ.get(name)
    os.environ[name] = value
    try:
        yield
    finally:
        if before is None:
            os.environ.pop(name, None)
        else:
            os.environ[name] = before


@contextmanager
def numba_optimisation(level: int | None):
    """Let numba compile with LLVM optimisation ``level`` (its ``NUMBA_OPT``, 0-3) inside the block.

    ``None`` leaves numba's setting alone. The previous setting is restored afterwards; code
    compiled inside keeps its level (also in numba's on-disk cache).
    """
    if level is None:
        yield
        return
    from numba.core import config as numba_config

    try:
        with _environment("NUMBA_OPT", str(int(level))):
            numba_config.reload_config()
            yield
    finally:
        numba_config.reload_config()


@contextmanager
def exact_numba_math():
    """Compile numba code without fast-math flags inside the block (also in chain processes).

    PyTensor compiles with LLVM's fast-math flags by default, which let the compiler reorder
    floating-point sums. Code compiled afresh and the same graph loaded from the compile cache
    then differ in the last bits (measured: a fit's draws differed by 4e-11 between a cold and a
    warm cache, enough to move R-hat in the third decimal), so the same config and seed would
    not give the same numbers. Without fast-math they are identical, at no measurable cost
    (benchmarks/fit_benchmark.py at n = 2,000: 0.494 against 0.510 ms per gradient for the
    marginal engine, 0.781 against 0.757 for the latent engine). The environment variable
    carries the setting to the chain processes PyMC starts, which compile the model again.
    """
    import pytensor

    flags = ",".join(filter(None, [os.environ.get("PYTENSOR_FLAGS"), "numba__fastmath=False"]))
    with _environment("PYTENSOR_FLAGS", flags), pytensor.config.change_flags(numba__fastmath=False):
        yield


def _warm_up_jit(nuts, point: dict) -> None:
    """Evaluate NUTS's log-density once here, so that numba compiles it now (and caches it on
    disk) rather than in every chain's process at its first step: the compile time is then
    counted as compile time and paid once, not once per chain."""
    from pymc.blocking import DictToArrayBijection

    func = nuts._logp_dlogp_func   # PyMC's compiled log-density and gradient of the NUTS block
    func.set_extra_values({v.name: point[v.name] for v in func._extra_vars})
    func(DictToArrayBijection.map({v.name: point[v.name] for v in nuts.vars}).data)


#: How PyMC's NUTS adapts its diagonal mass matrix in the compound sampler during warm-up:
#: ``"variance"`` (PyMC's default, the draws' variances in windows) or ``"gradient"`` (PyMC's
#: experimental ``QuadPotentialDiagAdaptExp`` with gradients, the scheme nutpie uses).
COMPOUND_MASS_ADAPTATION = "variance"


def _compound_potential(nuts_values, start: dict, warmup: int):
    """The mass-matrix adaptation of :data:`COMPOUND_MASS_ADAPTATION` (None: PyMC's default)."""
    if COMPOUND_MASS_ADAPTATION == "variance":
        return None
    if COMPOUND_MASS_ADAPTATION != "gradient":
        raise ValueError(f"COMPOUND_MASS_ADAPTATION is {COMPOUND_MASS_ADAPTATION!r}")
    from pymc.blocking import DictToArrayBijection
    from pymc.step_methods.hmc import quadpotential

    mean = DictToArrayBijection.map({v.name: start[v.name] for v in nuts_values}).data
    # as pm.sample's "jitter+adapt_diag_grad": adaptation stops 50 iterations before warm-up ends
    return quadpotential.QuadPotentialDiagAdaptExp(len(mean), mean, alpha=0.02, use_grads=True,
                                                   stop_adaptation=warmup - 50 if warmup > 250 else None)


def _run_compound(model, extra_steps: list, chains: int, warmup: int, draws: int, cores: int, seed: int,
                  target_accept: float, progress: bool, callback=None):
    """PyMC's sampler with the engine's steps first, then NUTS on every other free variable."""
    import pymc as pm
    import pytensor

    taken = {v.name for step in extra_steps for v in step.vars}
    nuts_rvs = [rv for rv in model.free_RVs if model.rvs_to_values[rv].name not in taken]
    # A step may name variables it updates that are not worth storing (``not_stored``).
    skip = {name for step in extra_steps for name in getattr(step, "not_stored", ())}
    keep = [v.name for v in model.free_RVs + model.deterministics if v.name not in skip]
    start = time.perf_counter()
    # NUTS is compiled by numba; the small helper functions (initial points, the values stored per
    # draw) run in PyTensor's Python mode, which compiles nothing (its C backend would compile
    # every new operation with a C compiler the first time, seconds each).
    with model, pytensor.config.change_flags(mode="FAST_COMPILE"):
        nuts_values = [model.rvs_to_values[rv] for rv in nuts_rvs]
        initial = model.initial_point()
        nuts = pm.NUTS(vars=nuts_values, target_accept=target_accept, compile_kwargs={"mode": "NUMBA"},
                       potential=_compound_potential(nuts_values, initial, warmup))
        _warm_up_jit(nuts, initial)
        starts = _jittered_starts(model, nuts_rvs, chains, seed)
        compile_seconds = time.perf_counter() - start
        start = time.perf_counter()
        idata = pm.sample(draws=draws, tune=warmup, chains=chains, cores=cores, random_seed=seed,
                          step=[*extra_steps, nuts], initvals=starts, var_names=keep,
                          progressbar=progress, discard_tuned_samples=False,
                          compute_convergence_checks=False, callback=callback)
    return idata, compile_seconds, time.perf_counter() - start


def compile_nutpie(model, numba_opt_level: int | None = None):
    """Compile ``model`` for nutpie once, as :func:`run` would, to reuse with other data.

    ``compiled.with_data(name=array, ...)`` then swaps the values of the model's ``pm.Data``
    without compiling again; pass the result to :func:`run` as ``compiled``.
    """
    import nutpie

    with numba_optimisation(numba_opt_level), exact_numba_math():
        return nutpie.compile_pymc_model(model, backend="numba")


def blas_threads(parallel_chains: int) -> int:
    """BLAS threads per chain when ``parallel_chains`` chains sample at once: the process's CPUs
    shared out, at least one.

    nutpie runs its chains as threads of one process, and every gradient's dense products (the
    sparse engine's supernodal panels, the marginal engine's projections) call the BLAS bundled
    with numpy and scipy, which by default starts one thread per CPU for each call. With two
    chains on two CPUs that makes four busy threads on two cores: on the invented field design of
    benchmarks/field_design_benchmark.py one sparse gradient took 69 ms in each of two concurrent
    processes against 23.5 ms alone, and 26-27 ms with one BLAS thread each (benchmarks/README.md).
    """
    return max(1, available_cpus() // max(1, int(parallel_chains)))


@contextmanager
def blas_thread_limit(threads: int):
    """Limit BLAS to ``threads`` threads while inside, here and in chain processes started inside.

    The libraries loaded in this process are limited through threadpoolctl. Chain processes that
    PyMC forks inherit that limit; processes started fresh (the forkserver and spawn methods,
    PyMC's choice on macOS) load their BLAS anew and read it from the environment variables set
    here (``OPENBLAS_NUM_THREADS``, ``OMP_NUM_THREADS``, ``MKL_NUM_THREADS``). The previous limits
    and variables come back on exit."""
    from threadpoolctl import threadpool_limits

    value = str(int(threads))
    with ExitStack() as stack:
        for name in BLAS_THREAD_VARIABLES:
            stack.enter_context(_environment(name, value))
        stack.enter_context(threadpool_limits(limits=int(threads), user_api="blas"))
        yield


#: Environment variables through which the BLAS builds of numpy and scipy (OpenBLAS, MKL, or an
#: OpenMP build) take their thread count when a process loads them.
BLAS_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def run(model, sampling: dict[str, Any], population: str, progress: bool = True,
        compiled=None, nutpie_options: dict[str, Any] | None = None,
        extra_steps: list | None = None, numba_opt_level: int | None = None,
        log: logging.Logger | None = None, progress_interval: float = PROGRESS_INTERVAL,
        progress_label: str | None = None) -> SamplingRun:
    """Sample ``model`` with the settings of ``config["sampling"]``.

    Parameters
    ----------
    model
        A PyMC model from an engine's ``build_model``.
    sampling
        Keys sampler, chains, warmup, draws, target_accept, seed.
    population
        Names the seed stream.
    compiled
        An already compiled nutpie model (e.g. the same model with other data through
        ``compiled.with_data``); skips compilation.
    nutpie_options
        Extra keyword arguments for ``nutpie.sample`` that an engine asks for (its
        ``NUTPIE_OPTIONS``, e.g. the latent engine's low-rank mass-matrix adaptation).
    extra_steps
        Step methods from the engine (``engine.extra_steps``) for variables NUTS must not touch;
        when given, PyMC's sampler runs them before NUTS in every iteration.
    numba_opt_level
        LLVM optimisation level for numba while compiling and sampling (an engine's
        ``NUMBA_OPT_LEVEL``); None keeps numba's own (3 unless ``NUMBA_OPT`` says otherwise).
    log, progress_interval, progress_label
        Where and how often (seconds) to write progress lines (:class:`ProgressLog`) when the
        progress bar cannot be seen: stderr is not a terminal, or ``progress`` is False. No lines
        without ``log``. Lines start with ``progress_label`` (default ``population <population>``).
    """
    sampling = with_defaults(sampling, "sampling")
    sampler = sampling["sampler"]
    if sampler not in SAMPLERS:
        raise UserError(f"config key 'sampling.sampler' is {sampler!r}; allowed: {', '.join(SAMPLERS)}")
    chains = int(sampling["chains"])
    warmup = int(sampling["warmup"])
    draws = int(sampling["draws"])
    target_accept = float(sampling["target_accept"])
    seed = sampler_seed(int(sampling["seed"]), population)
    cores = max(1, min(chains, available_cpus()))
    info: dict[str, Any] = dict(sampler=sampler, seed=seed, run_seed=int(sampling["seed"]),
                                chains=chains, warmup=warmup, draws=draws, target_accept=target_accept)
    if numba_opt_level is not None:
        info["numba_opt_level"] = int(numba_opt_level)
    bar = progress and stderr_is_terminal()
    label = progress_label or f"population {population}"
    tracker = (ProgressLog(log, label, chains, warmup, draws, progress_interval)
               if log is not None and not bar else None)
    info["blas_threads"] = blas_threads(cores)
    with numba_optimisation(numba_opt_level), exact_numba_math(), blas_thread_limit(info["blas_threads"]):
        idata = _sample(model, info, chains, warmup, draws, cores, seed, target_accept, bar,
                        compiled, nutpie_options, extra_steps, tracker)
    grads = (_count(idata, "sample_stats", "n_steps")
             + _count(idata, "warmup_sample_stats", "n_steps"))
    info["gradient_evaluations"] = grads
    info["divergences"] = _count(idata, "sample_stats", "diverging")
    info["seconds_per_gradient"] = info["sampling_seconds"] / grads * cores if grads else None
    for group in [g for g in idata.groups() if g.startswith("warmup")]:
        del idata[group]
    return SamplingRun(idata=idata, info=info)


def _sample(model, info: dict, chains: int, warmup: int, draws: int, cores: int, seed: int,
            target_accept: float, progress: bool, compiled, nutpie_options, extra_steps,
            tracker: ProgressLog | None = None):
    """Run the sampler ``info["sampler"]`` names; fills the timing entries of ``info``. With a
    ``tracker``, the sampler reports its progress to it."""
    callback = tracker.pymc_callback if tracker is not None else None
    sampler = info["sampler"]
    if extra_steps:
        info["sampler"] = "pymc"
        info["requested_sampler"] = sampler
        info["compound_steps"] = [type(step).__name__ for step in extra_steps] + ["NUTS"]
        idata, info["compile_seconds"], info["sampling_seconds"] = _run_compound(
            model, extra_steps, chains, warmup, draws, cores, seed, target_accept, progress, callback)
    elif sampler == "nutpie":
        import nutpie

        start = time.perf_counter()
        if compiled is None:
            compiled = nutpie.compile_pymc_model(model, backend="numba")
        info["compile_seconds"] = time.perf_counter() - start
        start = time.perf_counter()
        if tracker is not None:
            # nutpie renders its state about 10 times per interval (at least once a second)
            rate_ms = int(min(1000.0, max(20.0, 100.0 * tracker.interval)))
            sampled = _NutpieProgress(compiled, tracker.nutpie_callback, rate_ms)
        else:
            sampled = compiled
        idata = nutpie.sample(sampled, draws=draws, tune=warmup, chains=chains, cores=cores, seed=seed,
                              target_accept=target_accept, progress_bar=progress,
                              save_warmup=True, **(nutpie_options or {}))
        info["nutpie_options"] = dict(nutpie_options or {})
        info["sampling_seconds"] = time.perf_counter() - start
        info["compiled"] = compiled
    else:
        import pymc as pm

        start = time.perf_counter()
        with model:
            idata = pm.sample(draws=draws, tune=warmup, chains=chains, cores=cores, random_seed=seed,
                              target_accept=target_accept, progressbar=progress,
                              discard_tuned_samples=False, compute_convergence_checks=False,
                              callback=callback)
        info["compile_seconds"] = None
        info["sampling_seconds"] = time.perf_counter() - start
    return idata
