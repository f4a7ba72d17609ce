"""The flow of a result Dataset, recovered from its provenance attributes."""

from __future__ import annotations

import json

from ...errors import InputDataError


def flow_of(ds):
    """(family, params) of the run that produced ``ds`` (from ``study_resolved``)."""
    text = ds.attrs.get("study_resolved")
    if not text:
        raise InputDataError("this Dataset has no 'study_resolved' attribute, so its flow is "
                             "unknown; figures of the flow need a file written by "
                             "`eddyhop run` (or eddyhop.simulate)")
    try:
        flow = json.loads(text)["flow"]
    except (ValueError, KeyError, TypeError):
        raise InputDataError("the Dataset's 'study_resolved' attribute is not a study "
                             "written by eddyhop (no [flow] table)") from None
    from ...flows import get_family

    family = get_family(flow["family"])
    return family, family.validate(as_study_params(flow["params"]))


def as_study_params(params: dict) -> dict:
    """Resolved parameters back in study-file form: a Fourier flow's stored modes hold floats,
    while a study gives the mode numbers m, n as integers."""
    params = dict(params)
    if isinstance(params.get("modes"), list):
        params["modes"] = [[int(v) if i < 2 and float(v).is_integer() else v
                            for i, v in enumerate(mode)] for mode in params["modes"]]
    return params
