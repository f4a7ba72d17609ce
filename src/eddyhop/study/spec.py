"""Study specification: TOML → validated, frozen dataclasses.

Every check names the field (``section.key``), the offending value and what is allowed; unknown
keys are errors.  The spec is plain data: it knows nothing of kernels, runners or xarray.
"""

from __future__ import annotations

import itertools
import json
import math
import numbers
import sys
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path
from typing import Any

from ..engine.schedule import MIN_CHECK_BATCH
from ..errors import StudyError
from ..flows import get_family
from .metadata import MetadataSpec, parse_metadata
from .readers import _choice, _number, _number_list, _reject_unknown, _table, _text
from .velocity_table import VelocityCorrelationSpec, parse_velocity_correlation

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

SCHEMA_VERSION = 1
STEP_LIMIT = 2**48  # steps per particle the counter-based streams address (see rng.py)
MIN_CHECK_PARTICLES = 2 * MIN_CHECK_BATCH
# Default subsample of the step check: this fraction of run.particles (at least
# MIN_CHECK_PARTICLES); the check integrates it once more at 2·dt (the run's own paths are the
# fine ones), so it costs
# about as much per particle as the run itself: ≈ 15-16 % of the run, within the 20 % budget
# (benchmarks/bench_stepcheck.py measured 1.21 at a fifth).
STEP_CHECK_FRACTION = 0.15
INTEGRATORS = ("euler_maruyama", "milstein", "strang_rk2", "rk4", "projected_rk45")
# run.tolerance of projected_rk45: position error allowed per advective time 1/(U k), in eddy
# sides π/k (error per unit step; see streamline.py)
DEFAULT_TOLERANCE = 1e-8
NOISE_MODELS = ("constant", "modulated")
PECLET_CONVENTIONS = ("wavenumber", "cell_side")
SPACINGS = ("log", "linear")


# ---- sections --------------------------------------------------------------------------------
@dataclass(frozen=True)
class FlowSpec:
    """Flow family and its checked parameters (see ``eddyhop.flows`` for each family)."""

    family: str
    params: dict

    @property
    def model(self):
        return get_family(self.family)


@dataclass(frozen=True)
class NoiseSpec:
    """Molecular diffusivity κ (length²/time), isotropic, Itô convention.

    ``kappa`` is always resolved; ``peclet`` is ``U/(κ k)`` under the ``wavenumber`` convention
    (the package default) or ``U (π/k)/κ`` under ``cell_side`` (a factor π larger).
    ``modulated`` noise has κ(x, y) = κ0 (1 + a sin kx sin ky) with ``|a| < 1``.
    """

    kappa: float
    peclet: float | None
    peclet_convention: str = "wavenumber"
    model: str = "constant"
    modulation: float = 0.0


@dataclass(frozen=True)
class RunSpec:
    """Ensemble size, time grid and numerics; times in model time units."""

    particles: int
    dt: float
    t_end: float
    n_times: int = 100
    spacing: str = "log"
    t_first: float | None = None
    times: tuple = ()  # explicit output times (override n_times/spacing/t_first)
    integrator: str = "strang_rk2"
    seed: int = 0
    workers: int = 1
    chunk: int = 8192
    batches: int = 32
    tracked: int = 0
    track_samples: int = 1000
    progress: bool = True
    # a-posteriori step-size check: a coupled 2·dt integration of the first
    # ``step_check_particles`` particles of every start region (see stepcheck.py)
    step_check: bool = False
    step_check_particles: int = 0
    # projected_rk45 only: position error per advective time 1/(U k), in eddy sides π/k
    tolerance: float = DEFAULT_TOLERANCE


@dataclass(frozen=True)
class AgingSpec:
    """Aging times t_a and number of log-spaced lags τ for aged MSDs ⟨|X(t_a+τ)−X(t_a)|²⟩."""

    times: tuple = ()
    lags: int = 40


@dataclass(frozen=True)
class MomentSpec:
    """Orders q of the absolute displacement moments ⟨|Δx|^q⟩, ⟨|Δy|^q⟩, ⟨|ΔX|^q⟩."""

    orders: tuple = (1.0, 2.0, 3.0, 4.0, 5.0, 6.0)


@dataclass(frozen=True)
class HoppingSpec:
    """Cell-hopping statistics; a cell change counts once the tracer is ``margin`` (fraction of
    the eddy side) inside the new cell, so noisy recrossings of a boundary are not counted.

    Cells are the squares [iπ/k, (i+1)π/k) × [jπ/k, (j+1)π/k) of the eddy lattice: exactly the
    eddies of the cellular flow (and of the oscillating cells at t = 0); for other families
    they are a lattice of the same size, so a "hop" is a crossing of that lattice."""

    enabled: bool = False
    margin: float = 0.05
    flight_gap: float | None = None  # max time between hops within one flight; default 1/(Uk)
    bins: int = 60


@dataclass(frozen=True)
class OutputSpec:
    path: str = "result.nc"
    length_unit: str = "1"
    time_unit: str = "1"


@dataclass(frozen=True)
class Study:
    """A whole validated study.  ``source_text`` is the TOML it came from (kept as provenance)."""

    title: str
    description: str
    flow: FlowSpec
    noise: NoiseSpec
    starts: tuple
    run: RunSpec
    aging: AgingSpec = field(default_factory=AgingSpec)
    moments: MomentSpec = field(default_factory=MomentSpec)
    hopping: HoppingSpec = field(default_factory=HoppingSpec)
    velocity_correlation: VelocityCorrelationSpec = field(
        default_factory=VelocityCorrelationSpec)
    output: OutputSpec = field(default_factory=OutputSpec)
    sweep: Any = None
    metadata: MetadataSpec = field(default_factory=MetadataSpec)
    source_text: str = ""
    source_path: str = ""

    def as_dict(self) -> dict:
        """Plain nested dict of the resolved study (for provenance and sweeps)."""
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name in ("source_text", "source_path"):
                continue
            if f.name == "metadata" and value == MetadataSpec():
                continue  # absent: resolved studies (and sweep fingerprints) stay as before
            if f.name == "velocity_correlation" and not value.enabled:
                continue  # absent when off: resolved studies (and sweep hashes) stay as before
            if f.name == "starts":
                out[f.name] = [s.as_dict() for s in value]
            elif hasattr(value, "__dataclass_fields__"):
                out[f.name] = asdict(value)
            elif hasattr(value, "as_dict"):
                out[f.name] = value.as_dict()
            else:
                out[f.name] = value
        return out


# ---- parsing ---------------------------------------------------------------------------------
def _parse_flow(document, source_path=""):
    table = dict(_table(document, "flow"))
    if "family" not in table:
        raise StudyError("flow.family is required")
    data_file = table.get("file")
    if isinstance(data_file, str) and source_path and not Path(data_file).is_absolute():
        # a data file named in a study is looked up next to the study file first
        beside = Path(source_path).resolve().parent / data_file
        if beside.exists():
            table["file"] = str(beside)
    family = get_family(table.pop("family"))
    return FlowSpec(family=family.name, params=family.validate(table, "flow"))


def _parse_noise(document, flow: FlowSpec):
    where = "noise"
    table = _table(document, "noise")
    _reject_unknown(table, {"kappa", "peclet", "peclet_convention", "model", "modulation"}, where)
    convention = _choice(table, "peclet_convention", where, PECLET_CONVENTIONS, "wavenumber")
    model = _choice(table, "model", where, NOISE_MODELS, "constant")
    if ("kappa" in table) == ("peclet" in table):
        raise StudyError("noise: give exactly one of noise.kappa (diffusivity) or noise.peclet")
    family = flow.model
    velocity = family.velocity_scale(flow.params)
    wavenumber = family.wavenumber(flow.params)
    from ..engine.noise import kappa_from_peclet, peclet_from_kappa

    if "kappa" in table:
        kappa = _number(table, "kappa", where, low=0.0)
        peclet = peclet_from_kappa(velocity, wavenumber, kappa, convention)
    else:
        peclet = _number(table, "peclet", where, low=0.0, low_open=True)
        if velocity == 0.0:
            raise StudyError("noise.peclet needs a moving flow (flow.U > 0); give noise.kappa")
        kappa = kappa_from_peclet(velocity, wavenumber, peclet, convention)
    modulation = _number(table, "modulation", where, default=0.0, low=-1.0, high=1.0,
                         low_open=True, high_open=True)
    if model == "constant" and modulation != 0.0:
        raise StudyError("noise.modulation needs noise.model = 'modulated'")
    if model == "modulated" and kappa == 0.0:
        raise StudyError("noise.model = 'modulated' needs kappa > 0")
    return NoiseSpec(kappa=kappa, peclet=peclet, peclet_convention=convention, model=model,
                     modulation=modulation)


def _parse_run(document, noise: NoiseSpec, flow: FlowSpec | None = None):
    where = "run"
    table = _table(document, "run")
    allowed = {f.name for f in fields(RunSpec)}
    _reject_unknown(table, allowed, where)
    particles = _number(table, "particles", where, low=1, high=10**9, integer=True)
    dt = _number(table, "dt", where, low=0.0, low_open=True)
    t_end = _number(table, "t_end", where, low=0.0, low_open=True)
    if dt > t_end:
        raise StudyError(f"run.dt = {dt:g} is larger than run.t_end = {t_end:g}")
    if t_end / dt > STEP_LIMIT:
        raise StudyError(f"run.t_end / run.dt = {t_end / dt:.3g} steps exceeds the random "
                         f"streams' limit of {STEP_LIMIT:.3g} steps per particle")
    n_times = _number(table, "n_times", where, default=100, low=2, high=10**6, integer=True)
    spacing = _choice(table, "spacing", where, SPACINGS, "log")
    t_first = None
    if "t_first" in table:
        t_first = _number(table, "t_first", where, low=0.0, low_open=True)
        if t_first >= t_end:
            raise StudyError(f"run.t_first = {t_first:g} must be below run.t_end = {t_end:g}")
    times = _number_list(table, "times", where, low=0.0, low_open=True)
    if times:
        if any(b <= a for a, b in itertools.pairwise(times)):
            raise StudyError(f"run.times = {list(times)} must be strictly increasing")
        if times[-1] > t_end:
            raise StudyError(f"run.times ends at {times[-1]:g}, after run.t_end = {t_end:g}")
        # each output time is recorded at the nearest step n·dt: two on one step, or one
        # before the first step, would silently shrink the requested grid
        steps = [round(t / dt) for t in times]
        if steps[0] < 1:
            raise StudyError(f"run.times starts at {times[0]:g}, before the first step "
                             f"run.dt = {dt:g}; output times must be at least about dt")
        clash = next((i for i in range(1, len(steps)) if steps[i] == steps[i - 1]), None)
        if clash is not None:
            raise StudyError(f"run.times {times[clash - 1]:g} and {times[clash]:g} fall on the "
                             f"same step of run.dt = {dt:g}; space them at least dt apart or "
                             f"reduce run.dt")
    integrator = _choice(table, "integrator", where, INTEGRATORS,
                         default_integrator(noise, flow))
    tolerance = _number(table, "tolerance", where, default=DEFAULT_TOLERANCE, low=1e-14,
                        high=1e-1)
    if "tolerance" in table and integrator != "projected_rk45":
        raise StudyError(f"run.tolerance = {tolerance:g} applies to run.integrator = "
                         f"'projected_rk45' only (this run uses '{integrator}', fixed steps)")
    if integrator == "projected_rk45":
        _check_projected(noise, flow)
    if integrator == "rk4" and noise.kappa != 0.0:
        raise StudyError("run.integrator = 'rk4' is deterministic and needs noise.kappa = 0; "
                         "for noisy runs choose euler_maruyama, milstein or strang_rk2")
    if integrator == "strang_rk2" and noise.model != "constant":
        raise StudyError("run.integrator = 'strang_rk2' needs additive noise "
                         "(noise.model = 'constant'); use milstein for modulated noise")
    seed = _number(table, "seed", where, default=0, low=0, high=2**63 - 1, integer=True)
    workers = _number(table, "workers", where, default=1, low=-1, high=1024, integer=True)
    if workers == 0:
        raise StudyError("run.workers = 0 is not allowed; use a positive count or -1 (all cores)")
    chunk = _number(table, "chunk", where, default=8192, low=1, high=10**8, integer=True)
    batches = _number(table, "batches", where, default=32, low=2, high=4096, integer=True)
    tracked = _number(table, "tracked", where, default=0, low=0, high=10**5, integer=True)
    track_samples = _number(table, "track_samples", where, default=1000, low=2, high=10**6,
                            integer=True)
    progress = table.get("progress", True)
    if not isinstance(progress, bool):
        raise StudyError(f"run.progress: expected true or false, got {progress!r}")
    step_check, check_particles = _parse_step_check(table, noise, particles)
    return RunSpec(particles=particles, dt=dt, t_end=t_end, n_times=n_times, spacing=spacing,
                   t_first=t_first, times=times, integrator=integrator, seed=seed, workers=workers,
                   chunk=chunk, batches=batches, tracked=min(tracked, particles),
                   track_samples=track_samples, progress=progress, step_check=step_check,
                   step_check_particles=check_particles, tolerance=tolerance)


def _check_projected(noise: NoiseSpec, flow: FlowSpec | None) -> None:
    """projected_rk45 keeps ψ, a constant of motion only of steady flows without noise."""
    if noise.kappa != 0.0:
        raise StudyError(f"run.integrator = 'projected_rk45' needs noise.kappa = 0 (got "
                         f"{noise.kappa:g}): with noise, tracers leave their streamlines; "
                         "choose strang_rk2, milstein or euler_maruyama")
    if flow is not None and not flow.model.steady:
        raise StudyError(f"run.integrator = 'projected_rk45' needs a steady flow; flow.family "
                         f"= '{flow.family}' is time-dependent (psi is not conserved); "
                         "choose rk4")


# Largest phase k·|u|·dt a single step may carry, in radians: 2**20, the range of the flows'
# argument reduction (flows/_trig.py: LIMIT), where the sine and cosine keep full accuracy.
# A step beyond it jumps over ~10**5 eddies: the flow is sampled at positions that round-off
# makes meaningless (a Fourier amplitude of 1e30 was run as pure diffusion), and a larger
# amplitude overflows the velocity.  Physical runs are many orders of magnitude below
# (accuracy needs k·|u|·dt well below 1; the step check measures that).
MAX_STEP_PHASE = 1048576.0


def _check_flow_range(flow: FlowSpec, run: RunSpec) -> None:
    """Refuse flow amplitudes whose speed overflows or whose step k·|u|·dt leaves the range
    in which the flow is evaluated accurately (see ``MAX_STEP_PHASE``)."""
    model = flow.model
    try:
        k = model.wavenumber(flow.params)
        speed, field = model.speed_bound(flow.params)
    except (KeyError, TypeError, ValueError, AttributeError):
        return  # a family without these scales (gridded data are checked when read)
    for parameter in model.parameters:  # a displacement of the cells: phase k·|B|
        if parameter.units == "length" and parameter.name in flow.params:
            shift = abs(float(flow.params[parameter.name])) * k
            if not shift <= MAX_STEP_PHASE:
                raise StudyError(
                    f"flow.{parameter.name} = {flow.params[parameter.name]:g} shifts the "
                    f"flow's phase by k·|{parameter.name}| = {shift:.3g} radians (k = {k:g}); "
                    f"allowed: at most {MAX_STEP_PHASE:.0f} (2**20), the range in which the "
                    "flow is evaluated accurately")
    if not field:
        return
    phase = speed * k * run.dt
    if math.isfinite(phase) and phase <= MAX_STEP_PHASE:
        return
    value = flow.params.get(field)
    shown = f"{value:g}" if isinstance(value, float) else "(the listed modes)"
    raise StudyError(
        f"flow.{field} = {shown} makes the flow speed ~{speed:.3g} and one step move "
        f"k·|u|·dt = {phase:.3g} radians of flow phase (k = {k:g}, run.dt = {run.dt:g}); "
        f"allowed: at most {MAX_STEP_PHASE:.0f} (2**20), the range in which the flow is "
        "evaluated accurately (beyond it the flow is lost in round-off or overflows); "
        "lower the amplitude or run.dt")


def default_integrator(noise: NoiseSpec, flow: FlowSpec | None = None) -> str:
    """The most accurate applicable scheme.  Deterministic runs (κ = 0): ``projected_rk45`` for
    steady flows (adaptive, position error within ``run.tolerance``, ψ kept to round-off over
    any horizon; fixed-step RK4 drifts off the streamlines, benchmarks/bench_streamline.py),
    RK4 for time-dependent ones.  Noisy runs: the Strang splitting (weak order 2) for additive
    noise, Milstein where κ varies in space (the splitting's exact Gaussian noise step needs
    constant κ)."""
    if noise.kappa == 0.0:
        return "projected_rk45" if flow is not None and flow.model.steady else "rk4"
    return "strang_rk2" if noise.model == "constant" else "milstein"


def _parse_step_check(table, noise: NoiseSpec, particles: int) -> tuple[bool, int]:
    """(run.step_check, run.step_check_particles), resolved.

    On by default for noisy runs with at least MIN_CHECK_PARTICLES particles; the subsample
    defaults to STEP_CHECK_FRACTION of the particles (at least MIN_CHECK_PARTICLES).
    """
    where = "run"
    noisy = noise.kappa > 0.0
    if "step_check" in table:
        step_check = table["step_check"]
        if not isinstance(step_check, bool):
            raise StudyError(f"run.step_check: expected true or false, got {step_check!r}")
        if step_check and not noisy:
            raise StudyError("run.step_check = true needs noise.kappa > 0: a deterministic run "
                             "(kappa = 0) has no statistical error to compare a step-size bias "
                             "with; set run.step_check = false")
        if step_check and particles < MIN_CHECK_PARTICLES:
            raise StudyError(f"run.step_check = true needs run.particles >= "
                             f"{MIN_CHECK_PARTICLES} for an error estimate (got {particles}); "
                             "use more particles or set run.step_check = false")
    else:
        step_check = noisy and particles >= MIN_CHECK_PARTICLES
    default = min(particles, max(MIN_CHECK_PARTICLES,
                                 math.ceil(STEP_CHECK_FRACTION * particles)))
    if "step_check_particles" in table:
        check_particles = _number(table, "step_check_particles", where, low=MIN_CHECK_PARTICLES,
                                  high=10**9, integer=True)
        if check_particles > particles:
            raise StudyError(f"run.step_check_particles = {check_particles} exceeds "
                             f"run.particles = {particles}; allowed: {MIN_CHECK_PARTICLES} to "
                             f"{particles}")
        if not step_check:
            raise StudyError(f"run.step_check_particles = {check_particles} is given but the "
                             "step check is off; set run.step_check = true (needs kappa > 0) "
                             "or remove it")
    else:
        check_particles = default if step_check else 0
    return step_check, check_particles


def _parse_aging(document, run: RunSpec):
    where = "aging"
    table = _table(document, "aging")
    _reject_unknown(table, {"times", "lags"}, where)
    times = _number_list(table, "times", where, low=0.0)
    for t_a in times:
        if t_a >= run.t_end:
            raise StudyError(f"aging.times contains {t_a:g}, which is not before "
                             f"run.t_end = {run.t_end:g}; aging times must leave room for lags")
    if list(times) != sorted(set(times)):
        raise StudyError(f"aging.times = {list(times)} must be strictly increasing")
    lags = _number(table, "lags", where, default=40, low=2, high=10**5, integer=True)
    return AgingSpec(times=times, lags=lags)


def _parse_moments(document):
    table = _table(document, "moments")
    _reject_unknown(table, {"orders"}, "moments")
    if "orders" not in table:
        return MomentSpec()
    orders = _number_list(table, "orders", "moments", low=0.0, low_open=True)
    return MomentSpec(orders=orders)


def _parse_hopping(document):
    where = "hopping"
    table = _table(document, "hopping")
    _reject_unknown(table, {"enabled", "margin", "flight_gap", "bins"}, where)
    enabled = table.get("enabled", bool(table))
    if not isinstance(enabled, bool):
        raise StudyError(f"hopping.enabled: expected true or false, got {enabled!r}")
    margin = _number(table, "margin", where, default=0.05, low=0.0, high=0.5, high_open=True)
    gap = None
    if "flight_gap" in table:
        gap = _number(table, "flight_gap", where, low=0.0, low_open=True)
    bins = _number(table, "bins", where, default=60, low=5, high=1000, integer=True)
    return HoppingSpec(enabled=enabled, margin=margin, flight_gap=gap, bins=bins)


def _parse_output(document):
    where = "output"
    table = _table(document, "output")
    _reject_unknown(table, {"path", "length_unit", "time_unit"}, where)
    return OutputSpec(path=_text(table, "path", where, "result.nc"),
                      length_unit=_text(table, "length_unit", where, "1"),
                      time_unit=_text(table, "time_unit", where, "1"))


TOP_LEVEL = {"schema_version", "title", "description", "flow", "noise", "start", "run", "aging",
             "moments", "hopping", "output", "sweep", "metadata",
             "velocity_correlation"}


def parse_study(document: dict, source_text: str = "", source_path: str = "") -> Study:
    """Validate a study given as a dict (as parsed from TOML) and resolve defaults."""
    from ..starts import parse_starts

    _reject_unknown(document, TOP_LEVEL, "study")
    version = document.get("schema_version", SCHEMA_VERSION)
    if version != SCHEMA_VERSION:
        raise StudyError(f"study.schema_version = {version!r} is not supported; this version of "
                         f"eddyhop reads schema_version = {SCHEMA_VERSION}")
    flow = _parse_flow(document, source_path)
    noise = _parse_noise(document, flow)
    run = _parse_run(document, noise, flow)
    _check_flow_range(flow, run)
    starts = parse_starts(document.get("start", {"kind": "uniform"}), flow)
    sweep = None
    if "sweep" in document:
        from .sweep_table import parse_sweep

        sweep = parse_sweep(_table(document, "sweep"), document, source_path,
                            parse_study=parse_study)
    return Study(
        title=_text(document, "title", "study", "untitled study"),
        description=_text(document, "description", "study", ""),
        flow=flow,
        noise=noise,
        starts=starts,
        run=run,
        aging=_parse_aging(document, run),
        moments=_parse_moments(document),
        hopping=_parse_hopping(document),
        velocity_correlation=parse_velocity_correlation(document, flow, run),
        output=_parse_output(document),
        sweep=sweep,
        metadata=parse_metadata(document.get("metadata")),
        # a study built in code still records its parameters as TOML text (provenance)
        source_text=source_text or study_document_toml(document),
        source_path=source_path,
    )


def _toml_key(key) -> str:
    key = str(key)
    return key if key and all(c.isascii() and (c.isalnum() or c in "_-") for c in key) \
        else json.dumps(key)


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        value = float(value)
        return repr(value) if math.isfinite(value) else ("nan" if math.isnan(value)
                                                         else ("inf" if value > 0 else "-inf"))
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # JSON escapes are valid TOML escapes
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} {value!r} as TOML")


def _toml_table(lines: list, table: dict, name: str, array: bool = False) -> None:
    scalars = {k: v for k, v in table.items() if not isinstance(v, dict)
               and not (isinstance(v, list) and v and all(isinstance(i, dict) for i in v))}
    if name:
        lines.append(f"\n[[{name}]]" if array else f"\n[{name}]")
    lines.extend(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in scalars.items())
    for key, value in table.items():
        if key in scalars:
            continue
        child = f"{name}.{_toml_key(key)}" if name else _toml_key(key)
        if isinstance(value, dict):
            _toml_table(lines, value, child)
        else:
            for item in value:
                _toml_table(lines, item, child, array=True)


def study_document_toml(document: dict) -> str:
    """TOML text of a study document given as a dict (for the provenance of studies built in
    code, which have no file); ``tomllib.loads`` of the result gives the document back."""
    lines = ["# written by eddyhop from a study built in code"]
    _toml_table(lines, document, "")
    return "\n".join(lines) + "\n"


def parse_study_text(text: str, source_path: str = "<string>") -> Study:
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{source_path} is not valid TOML: {exc}") from None
    return parse_study(document, source_text=text, source_path=source_path)


def load_study(path) -> Study:
    """Read and validate a study file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise StudyError(f"study file {str(path)!r} does not exist") from None
    except UnicodeDecodeError:
        raise StudyError(f"study file {str(path)!r} is not UTF-8 text (is it a TOML file?)") \
            from None
    except OSError as exc:  # a name too long for the file system, no permission, a folder, …
        text = str(path)
        shown = text if len(text) <= 80 else text[:60] + "…" + text[-15:]
        raise StudyError(f"study file {shown!r} cannot be read ({exc.strerror or exc})") \
            from None
    return parse_study_text(text, str(path))
