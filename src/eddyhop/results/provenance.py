"""Provenance a referee can follow, attached to every file eddyhop writes.

Every netCDF file records (global attributes, CF 1.10 and ACDD 1.3 names where one exists):

- ``eddyhop_version``, ``python_version``, ``numpy_version``, ``numba_version``,
  ``scipy_version``, ``xarray_version``, ``netcdf4_version`` (the Python package),
  ``netcdf_c_version``, ``hdf5_version`` and ``platform``: the software of the writer;
- ``command_line``: the eddyhop command as typed, or for the Python API the function called
  and the first caller outside the package (file and line);
- ``input_files``: one line per input file, ``sha256:<hex>  <path>`` (the format that
  ``sha256sum -c`` reads once the prefix is removed);
- ``history`` (CF): one line per step, oldest first, each giving the UTC time, the step, the
  software, the command and the inputs with their checksums.  A command that derives a file
  from another (``analyse``, ``merge``) keeps the parent's lines and appends its own, so the
  parent's provenance survives even where this file's own attributes name the newer writer;
- ``date_created`` (ACDD), ``keywords``, ``creator_name`` … from the study's ``[metadata]``.

Figures carry the software and command in their metadata (PNG text chunks, PDF info, SVG
metadata); the HTML report carries them in ``<meta>`` elements with the input's checksum.

The writer also enforces two CF rules that xarray does not: coordinate variables carry no
``_FillValue`` (CF 1.10 §2.5.1), and no attribute is a string standing for nothing
(``'none'``, ``'[]'``): an attribute without a value is left out.
"""

from __future__ import annotations

import datetime as _dt
import functools
import hashlib
import os
import platform as _platform
import sys
from pathlib import Path

from .. import __version__

#: (attribute, distribution name) of the numerical dependencies whose versions are recorded
DEPENDENCIES = (
    ("numpy_version", "numpy"),
    ("numba_version", "numba"),
    ("scipy_version", "scipy"),
    ("xarray_version", "xarray"),
    ("netcdf4_version", "netCDF4"),
)
#: attribute values that stand for "nothing": such an attribute is dropped when writing
EMPTY_VALUES = ("none", "None", "[]", "{}", "")
#: the attributes a writer stamps (each write sets them afresh)
SOFTWARE_ATTRS = ("eddyhop_version", "python_version", *(a for a, _ in DEPENDENCIES),
                  "netcdf_c_version", "hdf5_version", "platform")
CONVENTIONS = "CF-1.10, ACDD-1.3"
#: keywords every eddyhop file gets (ACDD ``keywords``), before the study's own
KEYWORDS = ("tracer dispersion", "effective diffusivity", "anomalous diffusion",
            "mean-squared displacement", "advection-diffusion", "Monte Carlo")


def _distribution_version(name: str) -> str:
    from importlib import metadata

    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        module = sys.modules.get(name)
        return str(getattr(module, "__version__", "not installed"))


def software_versions() -> dict:
    """``{attribute: version}`` of eddyhop, Python, the numerical dependencies, the netCDF-C
    and HDF5 libraries under netCDF4, and the platform (all strings).

    Looked up once per process (reading the installed distributions' metadata costs ~10 ms
    each time, and a run or a plot stamps several files); the caller gets its own copy."""
    return dict(_software_versions())


@functools.lru_cache(maxsize=1)
def _software_versions() -> dict:
    out = {"eddyhop_version": __version__,
           "python_version": _platform.python_version()}
    for attribute, name in DEPENDENCIES:
        out[attribute] = _distribution_version(name)
    try:
        import netCDF4

        out["netcdf_c_version"] = str(netCDF4.__netcdf4libversion__)
        out["hdf5_version"] = str(netCDF4.__hdf5libversion__)
    except (ImportError, AttributeError):  # pragma: no cover - netCDF4 is a dependency
        pass
    out["platform"] = _platform.platform()
    return out


def software_summary(versions: dict | None = None) -> str:
    """One-line form of :func:`software_versions` for a ``history`` line."""
    v = versions or software_versions()
    names = [("eddyhop", "eddyhop_version"), ("Python", "python_version"),
             ("numpy", "numpy_version"), ("numba", "numba_version"), ("scipy", "scipy_version"),
             ("xarray", "xarray_version"), ("netCDF4", "netcdf4_version")]
    parts = [f"{label} {v[key]}" for label, key in names if key in v]
    return ", ".join(parts) + (f"; {v['platform']}" if "platform" in v else "")


def _shell_quote(argument: str) -> str:
    import shlex

    return shlex.quote(argument)


def _cli_context():
    click = sys.modules.get("click")
    if click is None:
        return None
    return click.get_current_context(silent=True)


def invocation() -> str:
    """How this file came to be written: the command line of an eddyhop command, or the
    Python API function and its caller.

    A command run from a shell gives ``sys.argv`` (program name shortened to ``eddyhop``).
    A command invoked in-process (a test runner, a notebook calling the CLI) gives the command
    path and its parsed options.  Outside any command it names the first caller outside the
    package: ``Python API: <script>:<line> (<function>)``."""
    context = _cli_context()
    if context is not None:
        program = Path(sys.argv[0]).name if sys.argv and sys.argv[0] else ""
        if program in ("eddyhop", "__main__.py") and len(sys.argv) > 1:
            return " ".join(["eddyhop", *(_shell_quote(a) for a in sys.argv[1:])])
        words = [context.command_path]
        for key, value in context.params.items():
            if value is None or value is False or value == ():
                continue
            option = "--" + key.replace("_", "-")
            if value is True:
                words.append(option)
            elif isinstance(value, (list, tuple)):
                words.extend(f"{option} {_shell_quote(str(v))}" for v in value)
            else:
                words.append(f"{option} {_shell_quote(str(value))}")
        return " ".join(words)
    import inspect

    package = str(Path(__file__).resolve().parent)
    called = None
    for frame in inspect.stack(context=0)[1:]:
        filename = str(Path(frame.filename).resolve()) if frame.filename else ""
        if filename.startswith(package + os.sep):
            module = Path(filename).relative_to(package).with_suffix("")
            called = "eddyhop." + ".".join(module.parts) + f".{frame.function}"
            continue
        where = f"{frame.filename}:{frame.lineno}"
        return f"Python API: {called or 'eddyhop'} called from {where} ({frame.function})"
    return f"Python API: {called or 'eddyhop'}"


def file_checksum(path) -> str:
    """``sha256:<hex>`` of the bytes of ``path`` (a sweep folder: of its manifest)."""
    path = _stand_in(Path(path))
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return "sha256:" + digest.hexdigest()


def _stand_in(path: Path) -> Path:
    """The file whose checksum stands for ``path``: itself, or a folder's sweep manifest."""
    if path.is_dir():
        from .outputs import MANIFEST_NAME

        return path / MANIFEST_NAME
    return path


def text_checksum(text: str) -> str:
    """``sha256:<hex>`` of ``text`` encoded as UTF-8 (the bytes a study file holds).

    >>> text_checksum("")[:23]
    'sha256:e3b0c44298fc1c14'
    """
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def input_lines(paths) -> list[str]:
    """``["sha256:<hex>  <path>", …]`` for the existing files among ``paths`` (a sweep folder
    stands for its manifest, which holds every point file's checksum)."""
    lines = []
    for path in paths:
        if not path:
            continue
        path = Path(path)
        try:
            checksum = file_checksum(path)
        except OSError:
            continue
        shown = _stand_in(path)
        lines.append(f"{checksum}  {shown}")
    return lines


def study_inputs(study) -> list[str]:
    """Input lines of a study: its file (or, for a study built in code, the checksum of the
    TOML text recorded in ``study_toml``) and any data file its flow reads."""
    lines = []
    if study.source_path and Path(study.source_path).is_file():
        lines += input_lines([study.source_path])
    elif study.source_text:
        lines.append(f"{text_checksum(study.source_text)}  (study_toml attribute)")
    data_file = study.flow.params.get("file") if hasattr(study.flow, "params") else None
    if isinstance(data_file, str):
        lines += input_lines([data_file])
    return lines


def now_text() -> str:
    """The current UTC time as ISO 8601 (seconds), the form of ``date_created``."""
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def history_line(step: str, inputs=(), when: str | None = None) -> str:
    """One CF ``history`` line: time, step, software, command and inputs (one line)."""
    text = (f"{when or now_text()} eddyhop {step} [{software_summary()}]: {invocation()}")
    if inputs:
        text += " ; inputs: " + " ; ".join(inputs)
    return text.replace("\n", " ")


def study_attrs(study, kind: str) -> dict:
    """Attributes a file written from ``study`` gets beyond the run parameters: ACDD
    discovery fields, the input files, the length and time scales as numbers with units."""
    inputs = study_inputs(study)
    family = study.flow.model.name
    keywords = [*KEYWORDS, f"{family} flow", *getattr(study.metadata, "keywords", ())]
    attrs = {
        "Conventions": CONVENTIONS,
        "history": history_line(f"created ({kind})", inputs),
        "date_created": now_text(),
        "keywords": ", ".join(dict.fromkeys(keywords)),
    }
    if inputs:
        attrs["input_files"] = "\n".join(inputs)
    attrs.update(study.metadata.attrs())
    attrs.update(scale_attrs(study))
    return attrs


def scale_attrs(study) -> dict:
    """Length and time scales of the flow as numbers, each with ``<name>_units`` (the
    study's output units) and ``<name>_definition``: 1/k, 1/(U k), 1/(κ k²).  Results are in
    model units; divide a length by ``length_scale`` (a time by ``advective_time_scale``) for
    the dimensionless value.  A scale the flow does not define is left out."""
    params = study.flow.params
    length_unit, time_unit = study.output.length_unit, study.output.time_unit
    out = {}
    k = params.get("k")
    velocity = params.get("U")
    kappa = study.noise.kappa
    if isinstance(k, (int, float)) and k > 0:
        out.update(length_scale=1.0 / k, length_scale_units=length_unit,
                   length_scale_definition="1/k (inverse wavenumber); one eddy has side "
                                           "pi*length_scale")
        if isinstance(velocity, (int, float)) and velocity > 0:
            out.update(advective_time_scale=1.0 / (velocity * k),
                       advective_time_scale_units=time_unit,
                       advective_time_scale_definition="1/(U k)")
        if isinstance(kappa, (int, float)) and kappa > 0:
            out.update(diffusive_time_scale=1.0 / (kappa * k * k),
                       diffusive_time_scale_units=time_unit,
                       diffusive_time_scale_definition="1/(kappa k^2), diffusion across a cell")
    return out


def derive(ds, step: str, inputs=(), parent=None):
    """A copy of ``ds`` (attributes copied, data shared) whose ``history`` gains one line for
    ``step`` (e.g. ``"analyse"``) with the checksums of ``inputs`` (paths), and whose
    ``input_files`` names them.  ``parent`` (a Dataset or its attrs): whose ``history`` to
    continue (default ``ds``'s own)."""
    parent_attrs = getattr(parent, "attrs", parent) if parent is not None else ds.attrs
    lines = input_lines(inputs)
    previous = str(parent_attrs.get("history", "") or "").strip()
    out = ds.copy(deep=False)
    out.attrs = dict(ds.attrs)
    line = history_line(step, lines)
    out.attrs["history"] = f"{previous}\n{line}" if previous else line
    if lines:
        out.attrs["input_files"] = "\n".join(lines)
    out.attrs["date_created"] = now_text()
    return out


def _is_empty(value) -> bool:
    return isinstance(value, str) and value.strip() in EMPTY_VALUES


def prepare_for_writing(ds):
    """A shallow copy of ``ds`` ready for netCDF: the writer's software stamped, the
    conventions named, no empty attributes, no ``_FillValue`` on coordinates, and the
    ``time``-like coordinates marked as such.  ``ds`` itself is not changed."""
    out = ds.copy(deep=False)
    attrs = {k: v for k, v in ds.attrs.items() if not _is_empty(v)}
    attrs.update(software_versions())
    attrs["command_line"] = invocation()  # the writer's; a parent's is in its history line
    if attrs.get("Conventions", "").startswith("CF") and "ACDD" not in attrs["Conventions"]:
        attrs["Conventions"] = CONVENTIONS
    attrs.setdefault("date_created", now_text())
    attrs.setdefault("keywords", ", ".join(KEYWORDS))
    attrs.setdefault("processing_level", PROCESSING_LEVEL)
    out.attrs = attrs
    for name, variable in out.variables.items():
        variable.attrs = {k: v for k, v in variable.attrs.items() if not _is_empty(v)}
        variable.attrs.setdefault("coverage_content_type", coverage_content_type(name, out))
        units = str(variable.attrs.get("units", ""))
        if units.endswith("^order"):
            # ⟨|Δx|^q⟩ has units L^q, q varying along `order`: no UDUNITS string says that
            # (CF 1.10 §3.1), so the unit is described instead of being a wrong `units`
            del variable.attrs["units"]
            variable.attrs["units_description"] = (f"({units[:-len('^order')]})^q, q = the "
                                                   "value of the order coordinate")
        if name in out.coords or name in out.dims:
            # CF 1.10 §2.5.1: coordinate variables must not have missing values
            variable.encoding["_FillValue"] = None
    return out


PROCESSING_LEVEL = ("model output: statistics of a simulated tracer ensemble or a noise-free "
                    "reference solution, in model units (see length_scale, "
                    "advective_time_scale)")
_QUALITY_SUFFIXES = ("_se", "_lower", "_upper", "_p_value", "_chi2", "_reduced_chi2",
                     "_verdict", "_converged", "_undetermined", "_status", "_flag")


def coverage_content_type(name, ds) -> str:
    """ACDD 1.3 ``coverage_content_type`` of variable ``name``: ``coordinate`` for
    coordinates, ``qualityInformation`` for standard errors, confidence bounds, fit tests and
    verdict flags, ``modelResult`` otherwise."""
    name = str(name)
    variable = ds.variables[name]
    if name in ds.coords or name in ds.dims:
        return "coordinate"
    if ("flag_meanings" in variable.attrs or name.endswith(_QUALITY_SUFFIXES)
            or "verdict" in name or name.startswith("check_")):
        return "qualityInformation"
    return "modelResult"


def figure_metadata(fmt: str):
    """Metadata for ``Figure.savefig`` in format ``fmt``: software and command line."""
    creator = f"eddyhop {__version__}"
    software = software_summary()
    command = invocation()
    if fmt == "png":
        return {"Software": creator, "Source": command, "Comment": software}
    if fmt == "pdf":
        return {"Creator": creator, "Subject": command, "Keywords": software}
    if fmt == "svg":
        return {"Creator": creator, "Source": command, "Description": software}
    return None


def html_meta(source=None) -> str:
    """``<meta>`` elements for the head of an HTML report: software, command and the input
    file with its checksum (all HTML-escaped)."""
    from html import escape

    items = [("eddyhop-software", software_summary()), ("eddyhop-command", invocation()),
             ("dcterms.created", now_text())]
    if source is not None:
        items += [("eddyhop-input", line) for line in input_lines([source])]
    return "".join(f"<meta name='{escape(k, quote=True)}' content='{escape(v, quote=True)}'>"
                   for k, v in items)
