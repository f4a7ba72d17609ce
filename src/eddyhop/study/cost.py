"""The work and the resources a study needs, known before any allocation or integration.

``estimate(study)`` is a pure function of the validated study (and a sweep's point count): it
never builds the event schedule (which for 2000 aging times × 10⁵ lags is itself too big) and
never allocates the arrays it sizes.  ``check_limits`` refuses, with one line naming the
quantity, the number and the limit, a study whose memory exceeds the machine's available
memory (a hard limit: such a run would die with MemoryError or swap the machine) or whose
estimated CPU time exceeds ``TIME_LIMIT_SECONDS`` (a soft limit the user lifts with
``--allow-long``).  The RNG step limit is refused earlier, by ``spec.py``.

Figures are estimates: memory within a factor of about two of a measured peak
(``tests/test_cost.py``); time from stored single-thread benchmark figures that scale with the
machine.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import StudyError

# ns per particle-step on one thread: Euler–Maruyama on the cellular flow, 11.6 ns, times the
# scheme's cost ratio (README performance table, benchmarks/results/latest.txt; a 2-vCPU
# machine — the figures scale with the machine's speed)
NS_PER_STEP_EM = 11.6
SCHEME_COST = {"euler_maruyama": 1.0, "milstein": 1.05, "strang_rk2": 1.52, "rk4": 1.52,
               # per kernel step at dt·U·k ≤ 0.1 and the default tolerance; adaptive, so
               # it grows ∝ dt·U·k above (1.9 µs per step at dt·U·k = 1 measured,
               # benchmarks/results/streamline_latest.txt): see _scheme_cost
               "projected_rk45": 16.0}


def _scheme_cost(study) -> float:
    """Cost of one particle-step relative to Euler–Maruyama."""
    run = study.run
    cost = SCHEME_COST.get(run.integrator, 1.52)
    if run.integrator == "projected_rk45":
        try:
            family, params = study.flow.model, study.flow.params
            advective = run.dt * family.velocity_scale(params) * family.wavenumber(params)
        except (KeyError, TypeError, ValueError, AttributeError):
            advective = 1.0
        cost *= max(1.0, advective / 0.1) if advective == advective else 10.0
    return cost
# per particle, the work at events (measured on the 2-vCPU development machine): an output
# time with the six default moment orders (28 columns) costs ≈ 5 ns per particle with blocks of
# 256 particles and ≈ 9 ns with blocks of 31 (a 4000-particle study), runner fold included
# (columns computed inside the lane sums; benchmarks/bench_time_to_answer.py, kernel group, and
# the same study at 4000 particles), so 0.18-0.32 ns per column: 0.3, the small-block figure
# (small studies are the ones whose outputs weigh); 9 ns per aged (t_a, lag) pair
# (tests/test_cost.py runs, whole simulate() CPU time minus the step figure above)
NS_PER_OUTPUT_COLUMN = 0.3
NS_PER_AGED_PAIR = 9.0
# per particle and (reference time, lag) pair of the velocity correlation: one vectorised flow
# evaluation and six sums, ≈ 10 ns (benchmarks/bench_velocity.py: +2.2 ns per particle-step at
# a pair every 4.8 steps)
NS_PER_VELOCITY_PAIR = 10.0
_VELOCITY_COLUMNS = 6  # len(velocity_pairs.VELOCITY_COLUMNS)
TIME_LIMIT_SECONDS = 24 * 3600.0  # soft limit; --allow-long lifts it

# The runner's layout (kept equal to runner.py / kernel.py; test_cost checks they agree)
_MAX_BLOCK = 256
_MOMENT_BASE_COLUMNS = 10  # kernel.N_BASE
_AGED_COLUMNS = 4  # len(kernel.AGED_COLUMNS)
_CHECK_COLUMNS = 5  # len(stepcheck.CHECK_COLUMNS)
_CHUNK_OUTPUT_BUDGET = 8 * 2**20  # runner.CHUNK_OUTPUT_BUDGET
# Python objects held while the schedule is built: one (a, l) tuple in a list per aged pair,
# one dict entry with a 4-item list per event (CPython 3.11+: about 120 and 250 bytes)
_BYTES_PER_AGED_PAIR = 120
_BYTES_PER_EVENT = 250


@dataclass(frozen=True)
class Cost:
    """Work and estimated resources of one study (one sweep point, times ``points``)."""

    starts: int
    particles: int  # per start region
    steps: int  # per particle
    particle_steps: int  # all starts, including the step check's coarse path
    check_particle_steps: int  # of which the step check's coarse (2·dt) path
    output_samples: int  # output times (upper bound before rounding to steps)
    tracked_samples: int  # tracked particles × track samples, all starts
    aged_pairs: int  # aging times × lags
    moment_orders: int
    points: int  # sweep points (1 without a sweep)
    memory_bytes: int  # estimated peak of one point
    cpu_seconds: float  # estimated single-thread CPU time of all points
    integrator: str

    def work_line(self) -> str:
        sweep = f" × {self.points} sweep points" if self.points > 1 else ""
        check = (f" (step check {self.check_particle_steps:.3g})"
                 if self.check_particle_steps else "")
        return (f"work: {self.particle_steps:.3g} particle-steps{check}{sweep}, "
                f"{self.output_samples} output times, {self.tracked_samples:.3g} tracked "
                f"samples, {self.aged_pairs:.3g} aged pairs, {self.moment_orders} moment orders")

    def estimate_line(self) -> str:
        per = " per point" if self.points > 1 else ""
        return (f"estimate: peak memory {format_bytes(self.memory_bytes)}{per}, CPU time "
                f"{format_seconds(self.cpu_seconds)} on one thread ({self.integrator}, "
                f"from the stored benchmark figure; scales with the machine)")


def format_bytes(n: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if n < 1024 or unit == "PiB":
            return f"{n:.3g} {unit}"
        n /= 1024
    return f"{n:.3g} PiB"  # pragma: no cover


def format_seconds(s: float) -> str:
    if s < 120:
        return f"{s:.3g} s"
    if s < 2 * 3600:
        return f"{s / 60:.3g} min"
    if s < 2 * 86400:
        return f"{s / 3600:.3g} h"
    if s < 2 * 365 * 86400:
        return f"{s / 86400:.3g} days"
    return f"{s / (365.25 * 86400):.3g} years"


def _check_subsample(check_particles: int, particles: int, block: int, batches: int) -> tuple:
    """(subsample size, check batches) as ``runner.check_plan`` gives them, without arrays."""
    from ..engine.schedule import MIN_CHECK_BATCH

    n_blocks = min(-(-check_particles // block), -(-particles // block))
    size = min(particles, n_blocks * block)
    count = min(batches, n_blocks, size // MIN_CHECK_BATCH)
    return (0, 0) if count < 2 else (size, count)


def estimate(study, points: int = 1, workers: int | None = None) -> Cost:
    """The work and the estimated peak memory (bytes) and CPU time (s) of ``study``.

    Memory counts the arrays the runner and the dataset hold at the peak: per start region the
    batch sums [batches, times, 10 + 3·orders] and aged sums [batches, aging, lags, 4] (kept
    for every start, and copied once more by the dataset), tracks [tracked, samples, 2] (twice:
    chunk pieces and their concatenation), the step check's sums; for the current start its
    positions and the block sums of the chunks in flight; and the
    Python objects of the event schedule.
    """
    run = study.run
    n = int(run.particles)
    n_starts = len(study.starts)
    steps = max(1, round(run.t_end / run.dt))
    if run.times:
        samples = len(run.times)
    else:
        samples = min(int(run.n_times), steps)
    track_samples = min(int(run.track_samples), steps) + 1 if run.tracked else 0
    ages = len(study.aging.times)
    lags = min(int(study.aging.lags), steps) if ages else 0
    aged_pairs = ages * lags
    velocity = getattr(study, "velocity_correlation", None)
    velocity_pairs = 0
    if velocity is not None and velocity.enabled:
        stride = max(1, round(velocity.lag_step / run.dt))
        velocity_pairs = len(velocity.reference_times) * (round(velocity.lag_max / run.dt)
                                                          // stride + 1)
    orders = len(study.moments.orders)
    block = max(1, min(_MAX_BLOCK, n // (4 * run.batches)))
    n_blocks = -(-n // block)
    batches = min(run.batches, n_blocks)
    columns = _MOMENT_BASE_COLUMNS + 3 * orders
    check_n, check_batches = ((0, 0) if not run.step_check else
                              _check_subsample(run.step_check_particles, n, block, run.batches))
    coarse_steps = check_n * (steps // 2) * n_starts
    particle_steps = n * steps * n_starts + coarse_steps

    moment_sums = 8 * batches * samples * columns
    aged_sums = 8 * batches * aged_pairs * _AGED_COLUMNS
    tracks = 8 * run.tracked * track_samples * 2
    check = 8 * 2 * check_batches * samples * _CHECK_COLUMNS
    # per start; the dataset copies the moment and check sums once (batch means) and a
    # quarter of the aged sums twice (batch_aged_msd and its masked copy)
    velocity_sums = 8 * batches * velocity_pairs * _VELOCITY_COLUMNS
    retained = 2 * (moment_sums + check + velocity_sums) + 1.5 * aged_sums + tracks
    per_block = 8 * (samples * columns + aged_pairs * _AGED_COLUMNS + 4 * (study.hopping.bins + 1)
                     + velocity_pairs * _VELOCITY_COLUMNS)
    chunk_blocks = max(1, _CHUNK_OUTPUT_BUDGET // max(per_block, 1))
    threads = run.workers if workers is None else workers
    if threads < 0:
        import os

        threads = os.cpu_count() or 1
    in_flight_chunks = 1 if threads <= 1 else 2 * threads  # joblib pre-dispatches 2 per worker
    chunk_blocks = min(chunk_blocks, max(1, run.chunk // block), n_blocks)
    chunk_bytes = in_flight_chunks * chunk_blocks * per_block
    positions = 2 * 8 * n  # x0, y0 of the current start region (measured: no extra copy)
    schedule = (_BYTES_PER_AGED_PAIR * (aged_pairs + velocity_pairs)
                + _BYTES_PER_EVENT * (samples + track_samples + ages + aged_pairs
                                      + velocity_pairs))
    memory = n_starts * retained + tracks + chunk_bytes + positions + schedule

    ns = NS_PER_STEP_EM * _scheme_cost(study)
    event_ns = (NS_PER_OUTPUT_COLUMN * samples * columns + NS_PER_AGED_PAIR * aged_pairs
                + NS_PER_VELOCITY_PAIR * velocity_pairs)
    seconds = (particle_steps * ns + n * n_starts * event_ns) * 1e-9 * points
    return Cost(starts=n_starts, particles=n, steps=steps, particle_steps=particle_steps,
                check_particle_steps=coarse_steps, output_samples=samples,
                tracked_samples=run.tracked * track_samples * n_starts, aged_pairs=aged_pairs,
                moment_orders=orders, points=points, memory_bytes=int(memory),
                cpu_seconds=seconds, integrator=run.integrator)


def available_memory() -> int | None:
    """Bytes of memory available to a new allocation now, or None if it cannot be read.

    Linux's own estimate (``MemAvailable`` in /proc/meminfo, the number psutil reports
    there) is read directly, sparing every run the import of psutil (≈ 15 ms); psutil
    answers elsewhere."""
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        import psutil

        return int(psutil.virtual_memory().available)
    except Exception:  # psutil absent or unsupported
        pass
    return None


def check_limits(cost: Cost, *, allow_long: bool = False, available: int | None = -1) -> None:
    """Refuse (StudyError, one line) a study over the memory or time limit.

    Memory above the available memory is a hard limit; CPU time above ``TIME_LIMIT_SECONDS``
    is refused unless ``allow_long``.  ``available = -1`` reads the machine; None skips the
    memory check (the machine does not tell).
    """
    check_resources(
        cost.memory_bytes, cost.cpu_seconds, what=cost.work_line(),
        work=f"{cost.particle_steps * cost.points:.3g} particle-steps",
        remedy_memory="reduce run.particles, run.n_times, run.batches, run.tracked × "
                      "run.track_samples, moments.orders, aging.times × aging.lags or the "
                      "velocity_correlation lags",
        allow_long=allow_long, available=available)


def check_resources(memory_bytes: float, cpu_seconds: float, *, what: str, work: str,
                    remedy_memory: str, remedy_time: str = "reduce the work",
                    allow_long: bool = False, available: int | None = -1) -> None:
    """The limits of ``check_limits`` for any job whose memory and CPU time are estimated."""
    if available == -1:
        available = available_memory()
    if available is not None and memory_bytes > available:
        raise StudyError(
            f"estimated peak memory {format_bytes(memory_bytes)} exceeds the "
            f"{format_bytes(available)} available on this machine ({what}); {remedy_memory}")
    if not allow_long and cpu_seconds > TIME_LIMIT_SECONDS:
        raise StudyError(
            f"estimated CPU time {format_seconds(cpu_seconds)} ({work}) exceeds the limit of "
            f"{format_seconds(TIME_LIMIT_SECONDS)}; {remedy_time} or pass --allow-long")


def study_cost_checked(study, *, points: int = 1, allow_long: bool = False,
                       workers: int | None = None) -> Cost:
    """``estimate`` then ``check_limits``: the guard run/sweep call before any work."""
    cost = estimate(study, points=points, workers=workers)
    check_limits(cost, allow_long=allow_long)
    return cost


__all__ = [
    "TIME_LIMIT_SECONDS",
    "Cost",
    "available_memory",
    "check_limits",
    "check_resources",
    "estimate",
    "format_bytes",
    "format_seconds",
    "study_cost_checked",
]
