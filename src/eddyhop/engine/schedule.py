"""Output, aging and tracking times turned into the kernel's step-indexed event schedule.

All times are multiples of ``dt`` (time 0 is step 0): requested times are rounded to the nearest
step and duplicates dropped, so the recorded coordinates are the times actually simulated.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import StudyError

# The step check splits its subsample into check batches of at least this many particles and
# needs at least two of them for a jackknife error (runner.check_plan plans them; spec
# validates run.step_check_particles against it).
MIN_CHECK_BATCH = 8


@dataclass(frozen=True)
class Schedule:
    dt: float
    out_steps: np.ndarray  # output slots (step indices, increasing, > 0)
    track_steps: np.ndarray  # tracked-trajectory samples (linear grid, from step 0)
    aging_steps: np.ndarray  # reference steps t_a / dt
    lag_steps: np.ndarray  # lag grid (steps, increasing, > 0)
    events: np.ndarray
    ev_out: np.ndarray
    ev_track: np.ndarray
    ev_ref: np.ndarray
    aged_ptr: np.ndarray
    aged_a: np.ndarray
    aged_l: np.ndarray
    # velocity correlation (velocity_pairs.py): reference steps, linear lag steps (from 0),
    # the reference index taken at each event (-1: none) and the (reference, lag) pairs
    # accumulated at event e: (vc_r, vc_l)[vc_ptr[e]:vc_ptr[e+1]]
    vc_ref_steps: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    vc_lag_steps: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    ev_vref: np.ndarray | None = None
    vc_ptr: np.ndarray | None = None
    vc_r: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    vc_l: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    def __post_init__(self):
        # a schedule without velocity pairs still hands the kernel arrays of the right shape
        if self.ev_vref is None:
            object.__setattr__(self, "ev_vref", np.full(self.events.size, -1, dtype=np.int64))
        if self.vc_ptr is None:
            object.__setattr__(self, "vc_ptr", np.zeros(self.events.size + 1, dtype=np.int64))

    @property
    def times(self) -> np.ndarray:
        return self.out_steps * self.dt

    @property
    def total_steps(self) -> int:
        return int(self.events[-1]) if self.events.size else 0

    def aged_valid(self) -> np.ndarray:
        """Mask [aging, lag]: True where t_a + τ lies within the run."""
        total = self.total_steps
        return (self.aging_steps[:, None] + self.lag_steps[None, :]) <= total


def output_steps(dt, t_end, n_times, spacing, t_first=None, times=()) -> np.ndarray:
    """Step indices of the output grid (explicit, log or linear), rounded and de-duplicated."""
    last = round(t_end / dt)
    if len(times):
        times = np.asarray(times, dtype=float)
    elif spacing == "log":
        first = t_first if t_first is not None else dt
        times = np.geomspace(max(first, dt), last * dt, n_times)
    else:
        first = t_first if t_first is not None else last * dt / n_times
        times = np.linspace(max(first, dt), last * dt, n_times)
    steps = np.unique(np.clip(np.rint(times / dt).astype(np.int64), 1, last))
    return steps


def build_schedule(run, aging, track_samples: int = 1000, velocity=None) -> Schedule:
    """Event schedule for a run spec, an aging spec and an optional velocity-correlation spec
    (see ``kernel.py``)."""
    dt = run.dt
    out = output_steps(dt, run.t_end, run.n_times, run.spacing, run.t_first, run.times)
    last = int(out[-1])
    if run.tracked > 0:
        track = np.unique(np.rint(np.linspace(0, last, min(track_samples, last) + 1))
                          .astype(np.int64))
    else:
        track = np.zeros(0, dtype=np.int64)
    ages = np.array([round(t / dt) for t in aging.times], dtype=np.int64)
    if ages.size and np.unique(ages).size != ages.size:
        raise StudyError(f"aging.times = {list(aging.times)} contains times closer than "
                         f"run.dt = {dt:g}; they fall on the same step")
    if ages.size:
        longest = last - int(ages.min())
        if longest < 1:
            raise StudyError("aging.times leave no lag before run.t_end")
        lags = np.unique(np.rint(np.geomspace(1, longest, aging.lags)).astype(np.int64))
    else:
        lags = np.zeros(0, dtype=np.int64)

    actions: dict[int, list] = {}

    def at(step):
        return actions.setdefault(int(step), [-1, -1, -1, [], -1, []])

    for slot, step in enumerate(out):
        at(step)[0] = slot
    for slot, step in enumerate(track):
        at(step)[1] = slot
    for a, step in enumerate(ages):
        at(step)[2] = a
        for l_index, lag in enumerate(lags):
            if step + lag <= last:
                at(step + lag)[3].append((a, l_index))
    if velocity is not None and velocity.enabled:
        from .velocity_pairs import velocity_steps

        vc_refs, vc_lags = velocity_steps(velocity, dt)
        for r, step in enumerate(vc_refs):
            at(step)[4] = r
            for l_index, lag in enumerate(vc_lags):
                at(step + lag)[5].append((r, l_index))
    else:
        vc_refs = vc_lags = np.zeros(0, dtype=np.int64)
    events = np.array(sorted(actions), dtype=np.int64)
    ev_out = np.array([actions[s][0] for s in events], dtype=np.int64)
    ev_track = np.array([actions[s][1] for s in events], dtype=np.int64)
    ev_ref = np.array([actions[s][2] for s in events], dtype=np.int64)
    pairs = [actions[s][3] for s in events]
    ptr = np.zeros(len(events) + 1, dtype=np.int64)
    ptr[1:] = np.cumsum([len(p) for p in pairs])
    flat = [pair for p in pairs for pair in p]
    aged_a = np.array([a for a, _ in flat], dtype=np.int64)
    aged_l = np.array([l_index for _, l_index in flat], dtype=np.int64)
    ev_vref = np.array([actions[s][4] for s in events], dtype=np.int64)
    vc_pairs = [actions[s][5] for s in events]
    vc_ptr = np.zeros(len(events) + 1, dtype=np.int64)
    vc_ptr[1:] = np.cumsum([len(p) for p in vc_pairs])
    vc_flat = [pair for p in vc_pairs for pair in p]
    return Schedule(dt=dt, out_steps=out, track_steps=track, aging_steps=ages, lag_steps=lags,
                    events=events, ev_out=ev_out, ev_track=ev_track, ev_ref=ev_ref,
                    aged_ptr=ptr, aged_a=aged_a, aged_l=aged_l,
                    vc_ref_steps=vc_refs, vc_lag_steps=vc_lags, ev_vref=ev_vref,
                    vc_ptr=vc_ptr, vc_r=np.array([r for r, _ in vc_flat], dtype=np.int64),
                    vc_l=np.array([j for _, j in vc_flat], dtype=np.int64))
