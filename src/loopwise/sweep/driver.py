"""A sweep of one model and of many: the nominal check, the design, the local search,
the boundaries, and the results. The plants are evaluated by the batch runner it is
given (`execute.py`), so this module decides what to evaluate and never how.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import Finding, Span
from ..results import is_library
from . import DEFAULT_SAMPLES
from .aggregate import Box, break_results, plant_table, sample_errors, sample_warnings
from .design import corners, describe, space_filling, spacing
from .evaluate import outcome_of
from .results import SampleCounts, SweepModelResult, SweepParam, SweepRun
from .search import WORST, Evidence, Target, boundaries, local_search, search_budget

__all__ = ["DEFAULT_SAMPLES", "SweepOptions", "prepare_sweep", "sweep_model", "sweep_file", "sweep_files",
           "sweep_paths"]


@dataclass(frozen=True)
class SweepOptions:
    """How a sweep samples the box: the size of the space-filling set and the design's seed."""

    samples: int = DEFAULT_SAMPLES
    seed: int = 0


def prepare_sweep(path: str, settings, root=None):
    """The model parsed once (with the settings' requirements and waivers), resolved at its
    nominal point (with --set) and checked in full, as `check` would. This first resolution
    reads the included files (inside `root` outside git, as `check`); the parsed model that
    is returned carries their trees, so that the plants' resolutions need no disk."""
    from ..analysis import check_model, parse_for_check
    from ..language.resolve import resolve_parsed

    parsed = parse_for_check(path, settings, root)
    model = resolve_parsed(parsed, dict(settings.overrides))
    return parsed.with_sources(model), model, check_model(model)


def sweep_model(parsed, model, nominal, fixed: dict, options: SweepOptions, run_batch,
                tick=lambda n: None) -> tuple[SweepModelResult, tuple[Finding, ...]]:
    """Sweep one model whose nominal point is already checked (`nominal`, a ModelResult).

    `run_batch(parsed, names, values, fixed)` evaluates plants (see execute.py).
    Returns the result and the errors of plants that could not be analysed.
    """
    # a library of params and blocks has nothing to sweep (as it has nothing to check)
    library = is_library(nominal)
    ranged = [] if library else [(n, lo, hi) for n, (lo, hi) in model.ranges.items()
                                 if hi > lo and n not in fixed]
    box = Box([n for n, _, _ in ranged], [lo for _, lo, _ in ranged], [hi for _, _, hi in ranged])
    dim = len(ranged)

    def evaluate(unit: np.ndarray):
        outcomes = run_batch(parsed, box.names, box.values(unit), fixed)
        tick(len(outcomes))
        return outcomes

    evidence = Evidence(evaluate, dim)
    nominal_values = np.array([model.params[n].value for n in box.names])
    evidence.add((nominal_values - box.lo) / (box.hi - box.lo) if dim else np.zeros(0),
                 outcome_of(nominal), "nominal")
    tick(1)
    findings = list(nominal.findings)
    stopped = False
    if dim:
        evidence.run(corners(dim, options.seed), "corners")
        evidence.run(space_filling(options.samples, dim, options.seed), "space_filling")
        targets = [Target(b, metric, sense) for b in range(len(nominal.breaks)) for metric, sense in WORST]
        stopped = local_search(evidence, targets, min(0.25, spacing(options.samples, dim)),
                               search_budget(options.samples, dim))
        brackets = boundaries(evidence, len(nominal.breaks))
    else:
        brackets = [[] for _ in nominal.breaks]
        if not library:
            findings.append(Finding("note", "LW691", "no param has a range (`param x = v in [lo, hi]`): "
                                    "checked at its nominal point only", Span(model.file, 1, 1)))
    if stopped:
        findings.append(Finding("note", "LW692", "the local search for the worst margins stopped at its "
                                "budget: a worse plant may lie near the worst found", Span(model.file, 0, 0),
                                "raise --samples to give it a larger budget"))
    failed, errors = sample_errors(model.file, evidence, box)
    counts = SampleCounts(*(evidence.count(p) for p in ("nominal", "corners", "space_filling",
                                                         "local_search", "boundary")))
    result = SweepModelResult(
        file=model.file, model=model.name,
        params=tuple(SweepParam(n, model.params[n].value, lo, hi) for n, lo, hi in ranged),
        fixed=tuple(sorted(fixed.items())), seed=options.seed, counts=counts,
        density=describe(options.samples, dim) if dim else "the nominal point only",
        breaks=break_results(nominal, model, evidence, box, brackets),
        findings=tuple(findings) + sample_warnings(model.file, evidence),
        search_stopped=stopped, failed_samples=failed, plants=plant_table(evidence, box, len(nominal.breaks)),
        nominal=nominal, parsed=parsed,
    )
    return result, errors


def sweep_file(path: str, settings, options: SweepOptions, run_batch, tick=lambda n: None, root=None):
    """(SweepModelResult or None, errors as findings) for one model file; `root` as for
    `run.check_one` (where includes must stay outside git)."""
    from ..run import guarded

    prepared, errors = guarded(path, lambda: prepare_sweep(path, settings, root))
    if prepared is None:
        return None, errors
    parsed, model, nominal = prepared
    swept, errors = guarded(path, lambda: sweep_model(parsed, model, nominal, dict(settings.overrides),
                                                      options, run_batch, tick))
    return (None, errors) if swept is None else swept


def sweep_files(files, settings=None, options: SweepOptions = SweepOptions(), *, jobs: int = 1,
                cluster: str | None = None, progress: bool = False, root=None) -> SweepRun:
    """Sweep these model files (from `run.discover`), one after another, each over `jobs`
    local processes (the shared pool: 0 one per CPU, capped at the CPUs) or the Dask
    scheduler at `cluster`. `progress` allows a count of analysed plants on stderr.
    `root`: as for `run.check_files` (default: the common folder of `files`)."""
    from .. import __version__
    from ..language.source import common_root
    from ..progress import progress_bar
    from ..settings import Settings
    from ..waivers import unmatched_settings_waivers
    from .execute import cluster_batches, local_batches

    settings = settings or Settings()
    root = common_root(files) if root is None and files else root
    runner = cluster_batches(cluster) if cluster else local_batches(jobs)
    models, errors = [], []
    # the number of plants is known only as the local search goes: a count without an end
    with progress_bar("sweeping: plants analysed", None, enabled=progress) as tick, runner as run_batch:
        for f in files:
            result, errs = sweep_file(str(f), settings, options, run_batch, tick, root)
            if result is not None:
                models.append(result)
            errors.extend(errs)
    # a settings waiver that covers swept models but matches nothing at their nominal points
    findings = unmatched_settings_waivers(settings, [m.nominal for m in models])
    return SweepRun(tuple(models), tuple(dict.fromkeys(errors)), __version__, findings)


def sweep_paths(paths, settings=None, options: SweepOptions = SweepOptions(), *, jobs: int = 1,
                cluster: str | None = None, progress: bool = False) -> SweepRun:
    """Sweep every model named by `paths` (files or folders, `run.discover`); see `sweep_files`."""
    from ..language.source import common_root
    from ..run import discover
    from ..settings import Settings

    settings = settings or Settings()
    # outside git, includes stay inside the folder tree of the swept paths (as `run.check_paths`)
    return sweep_files(discover(paths, settings), settings, options, jobs=jobs, cluster=cluster,
                       progress=progress, root=common_root(paths))

