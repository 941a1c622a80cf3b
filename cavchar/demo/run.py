"""``run_demo``: the whole job of cavchar on the invented scenario, in one call.

Steps (every random draw from a fixed seed, so two runs give the same files):

1. simulate the data set of :data:`cavchar.demo.scenario.SCENARIO` with
   :mod:`cavchar.simulate` and write it to ``DIR/data`` in the formats the
   readers take;
2. fit the records (ring-down, raw probe record, jump records) through the batch
   path, :func:`cavchar.batch.fit_many` on a local Dask cluster, and write the
   result files to ``DIR/results``;
3. log every fit in a fresh cooldown log ``DIR/cavchar-demo.sqlite``;
4. the trend across cooldowns with the probability that the lifetime fell,
   a qualification against the example spec ``DIR/spec.toml`` and the thermal
   budget from the stage-temperature sweep;
5. one HTML report, ``DIR/report.html``, that ties them together.

Every number in the report comes from a fit of the simulated records; none is made up.
"""

from __future__ import annotations

import json
import math
import time
import zlib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from cavchar.demo.scenario import SCENARIO, CooldownPlan, Scenario
from cavchar.errors import InputError

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["DemoJob", "DemoOutcome", "plan_jobs", "run_demo", "DEFAULT_SEED", "LOG_NAME",
           "REPORT_NAME", "SPEC_NAME"]

DEFAULT_SEED = 2031
LOG_NAME = "cavchar-demo.sqlite"
REPORT_NAME = "report.html"
SPEC_NAME = "spec.toml"
TRUTH_NAME = "scenario.json"


@dataclass
class DemoJob:
    """One record of the demo: how to simulate it, how to fit it, what is true."""

    name: str
    label: str
    kind: str                      # "ringdown", "probes" or "jumps"
    plan: CooldownPlan
    stage_temp_k: float
    truths: dict[str, float]
    seed: int                      # of the simulation
    fit_seed: int                  # of the sampler
    figures: bool = True
    data_path: Path | None = None
    result_path: Path | None = None
    result: FitResult | None = None
    fit_id: int | None = None
    #: time average of the simulated photon number (the hidden path), None for a ring-down
    realized_n: float | None = None


@dataclass
class DemoOutcome:
    """What :func:`run_demo` did: files written, jobs, timings."""

    out_dir: Path
    report: Path
    log: Path
    spec: Path
    jobs: list[DemoJob]
    elapsed_s: float
    timings: dict[str, float] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def job_seeds(seed: int, name: str) -> tuple[int, int]:
    """Seeds of a record's simulation and of its fit: independent streams of
    :class:`numpy.random.SeedSequence` keyed by the base seed and the record's name
    (so the quick and the full demo share the records they have in common)."""
    import numpy as np

    state = np.random.SeedSequence([int(seed), zlib.crc32(name.encode())]).generate_state(2)
    return int(state[0]), int(state[1])


def plan_jobs(scenario: Scenario = SCENARIO, quick: bool = False,
              seed: int = DEFAULT_SEED) -> list[DemoJob]:
    """The records of the demo, in the order they were taken (and are logged)."""
    first, second, third = scenario.cooldowns
    jobs: list[DemoJob] = []

    def truths(plan: CooldownPlan, temp: float, with_n: bool = True) -> dict[str, float]:
        out = {"lifetime": plan.lifetime_s,
               "quality_factor": 2 * math.pi * scenario.freq_hz * plan.lifetime_s,
               "linewidth": 1 / (2 * math.pi * plan.lifetime_s),
               "amplitude_decay_time": 2 * plan.lifetime_s}
        if with_n:
            out["n_thermal"] = scenario.n_thermal(plan, temp)
            out["effective_temperature"] = scenario.effective_temperature(plan, temp)
        return out

    def add(name, label, kind, plan, temp, with_n=True, figures=True) -> None:
        jobs.append(DemoJob(name, label, kind, plan, temp, truths(plan, temp, with_n),
                            *job_seeds(seed, name), figures))

    add("ringdown_2031A", f"{first.label} · ring-down of mirror set M-14", "ringdown", first,
        first.stage_temp_k, with_n=False)
    add("probes_2031A", f"{first.label} · raw probe record", "probes", first,
        first.stage_temp_k)
    add("jumps_2031A", f"{first.label} · jump record", "jumps", first, first.stage_temp_k)
    add("jumps_2031B", f"{second.label} · jump record", "jumps", second, second.stage_temp_k,
        figures=not quick)
    for temp in (third.sweep_quick_k if quick else third.sweep_k):
        add(f"jumps_2031C_{round(temp * 1e3):03d}mK",
            f"{third.label} · jump record at {temp * 1e3:.0f} mK stage", "jumps", third, temp,
            figures=False)
    add("jumps_2031C", f"{third.label} · jump record", "jumps", third, third.stage_temp_k,
        figures=not quick)
    return jobs


# ------------------------------------------------------------------ data


def _simulate(job: DemoJob, scenario: Scenario, quick: bool, folder: Path, force: bool) -> None:
    import numpy as np

    from cavchar import simulate
    from cavchar.io import write_record

    plan = job.plan
    meta = {"scenario": "invented cavchar demo data (see examples/README.md)",
            "cavity": scenario.cavity, "cooldown": plan.label,
            "stage_temperature": f"{job.stage_temp_k!r} K",
            "mode_frequency": f"{scenario.freq_hz!r} Hz"}
    n_th = job.truths.get("n_thermal", scenario.n_thermal(plan, job.stage_temp_k))
    if job.kind == "ringdown":
        times = np.linspace(0.0, scenario.ringdown_span_s, scenario.ringdown_points)
        record = simulate.simulate_ringdown(
            "power", times, plan.lifetime_s, amplitude=scenario.ringdown_amplitude,
            floor=scenario.ringdown_floor, noise=scenario.ringdown_noise, seed=job.seed,
            metadata=meta)
    elif job.kind == "probes":
        duration = scenario.probe_duration_quick_s if quick else scenario.probe_duration_s
        times, _ = simulate.probe_times(duration, scenario.probe_interval_s)
        from cavchar.models.probes.response import FringeResponse

        response = FringeResponse(visibility=scenario.probe_visibility,
                                  phase_per_photon=math.pi, phase_offset=0.0,
                                  readout_error_0=scenario.probe_error0,
                                  readout_error_1=scenario.probe_error1)
        record, hidden = simulate.simulate_probe_record(plan.lifetime_s, n_th, times, response,
                                                        seed=job.seed, metadata=meta)
        job.realized_n = float(np.mean(hidden.photons))
    else:
        record = simulate.simulate_jump_record(plan.lifetime_s, n_th, scenario.jump_duration_s,
                                               seed=job.seed, metadata=meta)
        dwell = np.diff(np.r_[record.time, record.end_time])
        job.realized_n = float(np.sum(dwell * record.photons) / np.sum(dwell))
    job.data_path = write_record(record, folder / f"{job.name}.csv", force=force)


# ------------------------------------------------------------------ fits


def _settings(job: DemoJob, quick: bool):
    from cavchar.inference import SamplerSettings

    # convergence checked every 250 steps: the run stops soon after it is long enough
    walkers = 16 if quick or job.kind == "probes" else 32
    return SamplerSettings(seed=job.fit_seed, quiet=True, n_walkers=walkers, chunk=250)


def batch_entry(job: DemoJob, scenario: Scenario, quick: bool) -> dict[str, Any]:
    """The demo record as a batch entry (docs/batch.md): the options of :func:`_fit`
    written as ``cavchar fit`` options, the sampler seed and walkers of the job."""
    settings = _settings(job, quick)
    entry: dict[str, Any] = {
        "kind": job.kind, "file": str(job.data_path), "label": job.name,
        "seed": job.fit_seed, "check_every": settings.chunk, "walkers": settings.n_walkers,
        "freq": f"{scenario.freq_hz!r}Hz", "stage_temp": f"{job.stage_temp_k!r}K"}
    if job.kind == "probes":
        entry.update(visibility="uniform:0.5,1", phase_per_photon=repr(math.pi),
                     phase_offset="0", readout_error_0=repr(scenario.probe_error0),
                     readout_error_1=repr(scenario.probe_error1))
    elif job.kind == "ringdown":
        entry["signal"] = "power"
    return entry


def _fit_batch(jobs: list[DemoJob], scenario: Scenario, quick: bool,
               workers: int | None) -> dict[str, float]:
    """Fit every job through the batch path (:func:`cavchar.batch.fit_many` on a local
    Dask cluster); sets ``job.result`` and returns each fit's wall time in s.  A failed
    fit stops the demo with that fit's own error (and exit code)."""
    from cavchar.batch import fit_many
    from cavchar.errors import CavcharError, ConvergenceError

    if not jobs:
        return {}
    run = fit_many([batch_entry(j, scenario, quick) for j in jobs], workers=workers,
                   figures=False, report=False)
    for _, row in run.summary.iterrows():
        if row["exit_class"] != 0:
            error = ConvergenceError if row["exit_class"] == 3 else (
                InputError if row["exit_class"] == 2 else CavcharError)
            raise error(f"demo record {row['label']}: {row['message']}")
    for job in jobs:
        job.result = run.results[job.name]
    return {r["label"]: float(r["wall_s"]) for _, r in run.summary.iterrows()}




# ------------------------------------------------------------------ the run


def _targets(out: Path, jobs: list[DemoJob]) -> list[Path]:
    files = [out / REPORT_NAME, out / SPEC_NAME, out / TRUTH_NAME, out / LOG_NAME]
    for job in jobs:
        files += [out / "data" / f"{job.name}.csv", out / "results" / f"{job.name}.json"]
    return files


def _fresh_log(path: Path, force: bool) -> None:
    for extra in ("", "-wal", "-shm", "-journal"):
        old = path.with_name(path.name + extra)
        if old.exists():
            if not force:
                raise InputError("the demo's log already exists", path=old,
                                 hint="pass --force to start a fresh one")
            old.unlink()


def run_demo(
    out_dir: str | Path,
    quick: bool = False,
    seed: int = DEFAULT_SEED,
    *,
    force: bool = False,
    scenario: Scenario = SCENARIO,
    progress: Callable[[str], None] | None = None,
    workers: int | None = None,
) -> DemoOutcome:
    """Write the invented data set to ``out_dir`` and run the whole job on it.

    Parameters
    ----------
    out_dir
        Folder for the data, results, log, spec and report (created if missing).
    quick
        A shorter probe record, two sweep temperatures instead of four, smaller
        ensembles and fewer figures (finishes in well under a minute on 2 cores).
    seed
        Base seed; each record's simulation and fit seeds follow from it and the
        record's name (:func:`job_seeds`).
    force
        Replace the files of an earlier run (the log is started afresh).
    progress
        Called with one line per step (default: silent).
    workers
        Worker processes of the local Dask cluster the records are fitted on (the
        batch path, docs/batch.md); default one per core.

    Returns
    -------
    DemoOutcome
    """
    from cavchar.io.atomic import check_can_write, write_text_atomic

    say = progress or (lambda _text: None)
    start = time.perf_counter()
    out = Path(out_dir)
    jobs = plan_jobs(scenario, quick, seed)
    for target in _targets(out, jobs):
        check_can_write(target, force)
    _fresh_log(out / LOG_NAME, force)
    timings: dict[str, float] = {}
    notes: list[str] = []

    tick = time.perf_counter()
    for job in jobs:
        _simulate(job, scenario, quick, out / "data", force)
    spec_path = write_text_atomic(out / SPEC_NAME, scenario.spec_toml, force=force)
    truth = {"scenario": "invented (see examples/README.md)", "seed": seed, "quick": quick,
             "lab": scenario.lab, "cavity": scenario.cavity, "mirror_set": scenario.mirror_set,
             "freq_hz": scenario.freq_hz,
             "records": {j.name: {"label": j.label, "kind": j.kind, "cooldown": j.plan.label,
                                  "stage_temp_k": j.stage_temp_k, "seed": j.seed,
                                  "fit_seed": j.fit_seed,
                                  "data": str(j.data_path), "truths": j.truths} for j in jobs}}
    write_text_atomic(out / TRUTH_NAME, json.dumps(truth, indent=1) + "\n", force=force)
    timings["simulate"] = time.perf_counter() - tick
    say(f"wrote the invented data set ({len(jobs)} records) to {out / 'data'}")

    todo = list(jobs)
    tick = time.perf_counter()
    walls = _fit_batch(todo, scenario, quick, workers)
    timings["fits (batch)"] = time.perf_counter() - tick
    for job in todo:
        job.result_path = job.result.to_json(out / "results" / f"{job.name}.json", force=force)
        timings[f"fit {job.name}"] = walls[job.name]
        say(f"fitted {job.label} in {walls[job.name]:.1f} s: "
            + "; ".join(job.result.one_line(n) for n in ("lifetime", "n_thermal")
                        if n in job.result.samples.columns))

    tick = time.perf_counter()
    from cavchar.demo.sections import tracking_sections

    fitted = [j for j in jobs if j.result is not None]
    sections, more = tracking_sections(out / LOG_NAME, spec_path, scenario, fitted, seed)
    notes += more
    timings["log, trend, qualification, budget"] = time.perf_counter() - tick
    say(f"logged {len(fitted)} fits in {out / LOG_NAME}; trend, qualification and budget done")

    tick = time.perf_counter()
    from cavchar.demo.sections import intro_text, scenario_section
    from cavchar.report import write_report

    report = write_report(
        [j.result for j in fitted], out / REPORT_NAME, force=force,
        title=f"Cavity {scenario.cavity}: three cooldowns of mirror set M-14 (cavchar demo)",
        labels=[j.label for j in fitted], truths=[j.truths for j in fitted],
        figures=[j.figures for j in fitted],
        extra_sections=[scenario_section(scenario, jobs, quick, notes), *sections],
        intro=intro_text(scenario, quick))
    timings["report"] = time.perf_counter() - tick
    elapsed = time.perf_counter() - start
    return DemoOutcome(out, report, out / LOG_NAME, spec_path, jobs, elapsed, timings, notes)
