"""CF-style attributes, provenance and atomic netCDF writes.

Attributes are flat strings and numbers (netCDF rejects nested dicts).  Provenance attached to
every output: package version, the study file's own text, the resolved parameters, seed,
integrator, dt, κ, the Péclet number and its convention.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from .. import __version__
from ..atomic import (  # noqa: F401  (re-exported: the atomic-file helpers used to live here)
    atomic_path,
    atomic_write_text,
    interrupts_deferred,
    remove_stale_temporaries,
    stale_temporaries,
)

CONVENTIONS = "CF-1.10, ACDD-1.3"


def units_for(length_unit: str, time_unit: str):
    """Function mapping symbolic units ("L2", "T-1", "L2 T-1", "Lq", "1") to unit strings."""

    def power(unit, exponent):
        if unit == "1":
            return ""
        return unit if exponent == 1 else f"{unit}{exponent}"

    def units(symbol: str) -> str:
        if symbol == "1":
            return "1"
        if symbol == "Lq":
            return "1" if length_unit == "1" else f"{length_unit}^order"
        parts = []
        for token in symbol.split():
            base, exponent = token[0], int(token[1:] or 1)
            parts.append(power(length_unit if base == "L" else time_unit, exponent))
        text = " ".join(p for p in parts if p)
        return text or "1"

    return units


def _flat(prefix: str, values: dict) -> dict:
    out = {}
    for key, value in values.items():
        name = f"{prefix}_{key}"
        if isinstance(value, bool):
            out[name] = int(value)
        elif isinstance(value, (int, float, str)):
            out[name] = value
        elif value is None or value == [] or value == ():
            continue  # not given: left out (no string standing for nothing)
        else:
            out[name] = json.dumps(value)
    return out


def provenance_attrs(study, kind: str, extra: dict | None = None) -> dict:
    """Global attributes: CF header plus full provenance of ``study``."""
    from ..engine.noise import PECLET_DEFINITIONS
    from .provenance import study_attrs

    family = study.flow.model
    attrs = {
        "title": study.title,
        "summary": study.description or study.title,
        "source": f"eddyhop {__version__} {kind} ensemble of tracers advected by a "
                  f"'{family.name}' flow with molecular diffusion",
        "comment": "Research estimate from a model flow. Not a validated engineering "
                   "correlation: for heat or mass transfer in real equipment use validated "
                   "methods and the applicable codes.",
        "eddyhop_version": __version__,
        "eddyhop_kind": kind,
        "flow_family": family.name,
        "integrator": study.run.integrator,
        "dt": study.run.dt,
        "seed": study.run.seed,
        "kappa": study.noise.kappa,
        "noise_model": study.noise.model,
        # always a number: infinite for deterministic runs (κ = 0), 0 for a flow at rest
        "peclet": float(study.noise.peclet) if study.noise.peclet is not None else math.inf,
        "peclet_convention": study.noise.peclet_convention,
        "peclet_definition": PECLET_DEFINITIONS[study.noise.peclet_convention],
        "ito_convention": "Ito: dX = (u + grad kappa) dt + sqrt(2 kappa) dW",
        "study_resolved": json.dumps(study.as_dict(), default=str, sort_keys=True),
    }
    if study.source_path:
        attrs["study_file"] = study.source_path
    if study.source_text:
        attrs["study_toml"] = study.source_text
    # Conventions, history, date_created, keywords, input files, scales, [metadata]
    attrs.update(study_attrs(study, kind))
    attrs.update(_flat("flow", study.flow.params))
    attrs.update(_flat("run", {k: v for k, v in study.as_dict()["run"].items()}))
    if extra:
        attrs.update(extra)
    return attrs


def check_output_path(path) -> Path:
    """Refuse early (before any computation) a path that cannot be written as given: a
    missing parent folder, a folder, a backslash or NUL in the name, an over-long name (see
    :func:`eddyhop.results.outputs.check_name`; the commands apply the full rule,
    :func:`eddyhop.results.outputs.guard_output`)."""
    from .outputs import check_name

    return check_name(path, option="output path")


def write_netcdf(ds, path) -> Path:
    """Write ``ds`` to ``path`` atomically (see :func:`atomic_path`)."""
    from .optional_dask import no_distributed_probe
    from .provenance import prepare_for_writing

    path = check_output_path(path)
    ds = prepare_for_writing(ds)  # writer's software, CF/ACDD rules (eddyhop.results.provenance)
    with atomic_path(path) as temporary, no_distributed_probe():
        ds.to_netcdf(temporary, engine="netcdf4", format="NETCDF4")
    return path


def open_result(path):
    """Open a result file fully into memory (the file is closed afterwards; Ctrl-C waits
    until it is).

    Anything that is not a readable netCDF file (missing, empty, truncated, a study's TOML
    text, a directory) raises :class:`~eddyhop.errors.InputDataError` whose one-line message
    names the file, so every command reading results reports it the same way.
    """
    import xarray as xr

    from ..errors import InputDataError
    from .optional_dask import spare_unused_dask

    spare_unused_dask()  # a result read into memory needs no dask.array
    path = Path(path)
    text = str(path)
    name = repr(text if len(text) <= 80 else text[:60] + "…" + text[-15:])
    try:
        path.stat()
    except FileNotFoundError:
        raise InputDataError(f"result file {name} does not exist") from None
    except OSError as exc:  # a name too long for the file system, a permission problem, …
        raise InputDataError(f"result file {name} cannot be read ({exc.strerror})") from None
    if path.is_dir():
        raise InputDataError(f"result file {name} is a directory, not a netCDF file")
    if path.stat().st_size == 0:
        raise InputDataError(f"result file {name} is empty (0 bytes), not a netCDF file; "
                             "was its run interrupted?")
    hint = ("it looks like a study file: run it with `eddyhop run` first"
            if path.suffix.lower() == ".toml" else
            "give a netCDF file written by eddyhop (run, analyse, merge or reference)")
    try:
        # Ctrl-C held while reading: one raised inside xarray's read can leave its netCDF lock
        # taken, and the close then waits for it for ever (seen: a sweep interrupted while it
        # read back a finished point)
        with interrupts_deferred(), xr.open_dataset(path, engine="netcdf4") as ds:
            return ds.load()
    except (OSError, ValueError, RuntimeError, KeyError, IndexError) as exc:
        # netCDF4/HDF5 report a wrong or damaged file as OSError ("Unknown file format",
        # "HDF error"); xarray as ValueError; decoding a truncated variable can raise others
        text = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        reason = text.strip().splitlines()[0] if text.strip() else type(exc).__name__
        raise InputDataError(f"result file {name} is not a readable netCDF file ({reason}); "
                             f"{hint}") from None


RESULT_KIND_TEXT = {"monte_carlo": "a run", "reference": "a reference solution",
                    "measured": "a measured-track analysis (eddyhop tracks)",
                    "sweep": "a merged sweep"}


def require_kind(ds, path, allowed, command: str, foreign_ok: bool = False):
    """Refuse (one line) a Dataset read from ``path`` whose ``eddyhop_kind`` is not in
    ``allowed``: a kind ``command`` does not take, or (unless ``foreign_ok``: the command
    checks the variables it needs itself) a foreign netCDF file with no ``eddyhop_kind``.
    Returns ``ds``."""
    from ..errors import InputDataError

    kind = ds.attrs.get("eddyhop_kind")
    text = str(path)
    name = repr(text if len(text) <= 80 else text[:60] + "…" + text[-15:])
    takes = ", ".join(RESULT_KIND_TEXT.get(k, k) for k in allowed)
    if kind is None and foreign_ok:
        return ds
    if kind is None:
        raise InputDataError(f"{name} is a netCDF file but not an eddyhop result (it has no "
                             f"eddyhop_kind attribute); `eddyhop {command}` takes {takes}")
    if kind not in allowed:
        hint = (": analyse one point file (FOLDER/points/<id>.nc); merge already analyses every "
                "point" if kind == "sweep" else "")
        raise InputDataError(f"{name} is {RESULT_KIND_TEXT.get(str(kind), repr(kind))} "
                             f"(eddyhop_kind = {kind!r}); `eddyhop {command}` takes {takes}"
                             f"{hint}")
    return ds
