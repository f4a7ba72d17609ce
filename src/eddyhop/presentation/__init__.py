"""Stage 10 — presentation: what a person reads — figures, the HTML report, printed answers.

Owns the matplotlib figures (``plots``; functions return Figures, no ``plt.show``), the
one-file HTML report (``report``) and the plain-text answers that ``analyse``, ``merge`` and
``sweep`` print (``text``, lists of lines).

May import: every stage below it (core, flows, starts, engine, study, results, analysis,
reference, ``eddyhop.api``, sweeps); never the CLI.

Until version 0.1 ``eddyhop.presentation`` was the module now at ``presentation.text``; its
names still resolve here, with a :class:`DeprecationWarning`, for one release.
"""

from __future__ import annotations


def __getattr__(name):
    if name.startswith("__") or name in ("plots", "report", "text"):  # submodules load normally
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    import importlib
    import warnings

    text = importlib.import_module(f"{__name__}.text")
    try:
        value = getattr(text, name)
    except AttributeError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    warnings.warn(f"eddyhop.presentation.{name} moved to eddyhop.presentation.text.{name}; "
                  "the old name works until the next release", DeprecationWarning, stacklevel=2)
    return value
