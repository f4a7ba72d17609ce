"""The one-file HTML report: content from a small real run and sweep, warnings, atomic write,
and a real headless browser (Debian's chromium) loading it with every figure decoded."""

from __future__ import annotations

import base64
import html
import os
import re
import shutil
import subprocess
import warnings

import numpy as np
import pytest

import eddyhop
from eddyhop.presentation.report import CAUTION, build_report, run_warnings, write_report
from tests.conftest import make_study


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    """A cellular run at Pe = 20 with two starts, aging, tracks and hopping, written to disk."""
    study = make_study(
        title="report test run",
        start=[{"kind": "uniform", "label": "anywhere"},
               {"kind": "box", "label": "corner", "x_min": 0.0, "x_max": 0.3, "y_min": 0.0,
                "y_max": 0.3}],
        noise={"peclet": 20.0},
        run={"particles": 512, "dt": 0.02, "t_end": 60.0, "n_times": 30, "tracked": 3,
             "track_samples": 150, "seed": 20261202},
        aging={"times": [1.0, 10.0], "lags": 10},
        hopping={"enabled": True},
    )
    ds = eddyhop.simulate(study)
    path = tmp_path_factory.mktemp("report") / "run.nc"
    eddyhop.write_netcdf(ds, path)
    return path, ds


@pytest.fixture(scope="module")
def report_file(result):
    path, _ = result
    return write_report(path, path.with_name("run.html"))


@pytest.fixture(scope="module")
def sweep_file(tmp_path_factory):
    from eddyhop.study.spec import parse_study
    from eddyhop.sweeps import run_sweep

    study = parse_study({
        "title": "report test sweep", "flow": {"family": "shear"}, "noise": {"peclet": 2.0},
        "run": {"particles": 256, "dt": 0.02, "t_end": 40.0, "n_times": 20, "seed": 4,
                "progress": False},
        "sweep": {"noise.peclet": [0.5, 2.0, 8.0]},
    })
    folder = tmp_path_factory.mktemp("sweep")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run_sweep(study, folder, backend="serial", progress=False)
    return folder / "sweep.nc"


FIGURE = re.compile(r"<figure id='fig-(\w+)' data-figure='\w+'[^>]*><img alt='[^']*' "
                    r"src='data:image/png;base64,([A-Za-z0-9+/=]+)'>")


def figures_in(text):
    return {name: base64.b64decode(data) for name, data in FIGURE.findall(text)}


def test_report_content(report_file):
    text = report_file.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    found = figures_in(text)
    assert sorted(found) == sorted(["msd", "starts", "exponent", "aging", "trajectories",
                                    "residence", "displacement_pdf", "kurtosis",
                                    "moment_spectrum"])
    for name, png in found.items():
        assert png[:8] == b"\x89PNG\r\n\x1a\n", name
        assert len(png) > 10_000, name  # a drawn figure, not an empty canvas
    assert html.escape(CAUTION, quote=True) in text
    # parameters, regimes, crossovers, D_eff with confidence interval, provenance
    for snippet in ("Study parameters", "Péclet number", ">20 (Pe = U/(kappa k)",
                    "<h3>Regimes</h3>", "<h3>Crossover times</h3>",
                    "Effective diffusivity (estimate [95% confidence interval])",
                    "Provenance", "Resolved study", "start &#x27;corner&#x27;",
                    "random seed</th><td>20261202<"):  # a seed is printed whole, not 2.026e+07
        assert snippet in text, snippet
    assert f"eddyhop {eddyhop.__version__}" in text
    # the D_eff row of each start holds an estimate followed by [lower, upper]
    assert len(re.findall(r"<td class=\"num\">[-0-9.e]+ \[[-0-9.e]+, [-0-9.e]+\]</td>",
                          text)) >= 6
    # self-contained: no reference leaves the file
    assert not re.search(r"(src|href)\s*=\s*['\"](?!data:|#)", text)
    assert "@import" not in text and "url(" not in text


def test_report_file_is_written_atomically(report_file):
    assert oct(report_file.stat().st_mode & 0o777) != oct(0o600)
    assert not list(report_file.parent.glob(".*.part"))


def test_report_of_a_sweep(sweep_file, tmp_path):
    out = write_report(sweep_file, tmp_path / "sweep.html")
    text = out.read_text(encoding="utf-8")
    assert sorted(figures_in(text)) == ["collapse", "deff_peclet", "exponent_map"]
    assert "sweep report" in text
    assert "swept: peclet" in text and "0.5, 2, 8" in text
    assert text.count("peclet = ") >= 3  # one D_eff row per swept value
    assert "Scaling with the Péclet number" in text
    # 256 particles per point: only some points reach a confirmed diffusive regime, and the
    # report says so instead of presenting a fit over them
    assert "No scaling fit" in text or "undetermined" in text
    # the summary opens the page: scaling lines, then regimes and crossovers at every point
    assert text.index("id='summary'") < text.index("id='warnings'")
    assert "Regimes at each swept point" in text
    assert text.count("<td>peclet = ") >= 3
    shown = text[:text.index("id='provenance'")]
    for internal in ("ShortRunWarning", "settled->diffusive", "deff_converged =",
                     "run.particles"):
        assert internal not in shown, internal
    assert shown.count("Run too short at") <= 1  # one warning, naming every point


def test_warnings_step_size_and_short_run(result):
    # a run made with a step too large for the eddies carries the runner's warning to the page
    # (the static warning of Euler–Maruyama without the measured step check)
    coarse = make_study(run={"particles": 256, "dt": 0.5, "t_end": 20.0, "n_times": 10,
                             "integrator": "euler_maruyama", "step_check": False})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        coarse_ds = eddyhop.simulate(coarse)
    messages = run_warnings(coarse_ds)
    assert messages[0].startswith("Large time step: run.dt = 0.5")
    assert "advective times" in messages[0]
    assert not any(m.startswith("Large time step") for m in run_warnings(result[1]))
    # A run cut off in its ballistic phase: the spread grows like t^2, not t.
    short = make_study(flow={"family": "shear"}, noise={"peclet": 1000.0},
                       run={"particles": 256, "dt": 0.01, "t_end": 0.5, "n_times": 20})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        short_ds = eddyhop.simulate(short)
    text = build_report(short_ds, figures=["msd"])
    assert "too short" in text
    assert "class='warnings'" in text


def test_unanalysed_report_can_skip_analysis(result):
    _, ds = result
    text = build_report(ds, figures=["msd"], analyse=False)
    assert "<h3>Regimes</h3>" not in text
    assert sorted(figures_in(text)) == ["msd"]


def test_missing_output_folder_is_refused(result, tmp_path):
    path, _ = result
    with pytest.raises(eddyhop.EddyhopError, match="does not exist"):
        write_report(path, tmp_path / "absent" / "r.html")


# ---- a real browser ----------------------------------------------------------------------------
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync"]
# Test-only probe injected into a copy of the report: records load errors of any element and,
# once the page has loaded, whether every image decoded; the result lands in the DOM.
PROBE = """<script>
window.__errors = [];
window.addEventListener('error', function (e) {
  window.__errors.push((e.target && (e.target.id || e.target.tagName)) || String(e.message));
}, true);
window.addEventListener('load', function () {
  var images = Array.prototype.slice.call(document.images);
  var broken = images.filter(function (i) { return !(i.complete && i.naturalWidth > 0); });
  var result = 'images=' + images.length + ';broken=' + broken.length + ';errors=' +
    window.__errors.length + ';figures=' +
    Array.prototype.map.call(document.querySelectorAll('figure[data-figure] img'),
      function (i) { return i.closest('figure').dataset.figure + ':' + i.naturalWidth; }).join(',');
  document.body.setAttribute('data-probe', result);
});
</script>"""


def chromium():
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    if os.environ.get("CI"):
        pytest.fail("chromium is not installed; .ci/run must `apt-get install -y chromium`")
    pytest.skip("chromium is not installed (apt-get install -y chromium)")


def run_browser(binary, profile, *arguments):
    return subprocess.run([binary, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", *arguments],
                          capture_output=True, text=True, timeout=120, check=False)


def assert_loads_with_every_figure(binary, page, tmp_path):
    """Load ``page`` in headless Chromium: no error events, every embedded figure decoded."""
    text = page.read_text(encoding="utf-8")
    probed = tmp_path / f"probed-{page.name}"
    probed.write_text(text.replace("<head>", "<head>" + PROBE, 1), encoding="utf-8")
    dom = run_browser(binary, tmp_path / f"profile-dom-{page.stem}",
                      "--virtual-time-budget=5000", "--dump-dom", probed.as_uri())
    assert dom.returncode == 0, dom.stderr[-2000:]
    match = re.search(r'data-probe="([^"]*)"', dom.stdout)
    assert match, dom.stdout[:500]
    probe = dict(item.split("=", 1) for item in match.group(1).split(";"))
    assert probe["broken"] == "0" and probe["errors"] == "0", probe
    decoded = dict(item.split(":") for item in probe["figures"].split(","))
    assert sorted(decoded) == sorted(figures_in(text)) and decoded
    assert all(int(width) > 300 for width in decoded.values()), decoded
    assert int(probe["images"]) == len(decoded)


def test_sweep_report_loads_in_headless_chromium(sweep_file, tmp_path):
    binary = chromium()
    page = write_report(sweep_file, tmp_path / "sweep.html")
    assert_loads_with_every_figure(binary, page, tmp_path)


def test_report_loads_in_headless_chromium(report_file, tmp_path):
    binary = chromium()
    assert_loads_with_every_figure(binary, report_file, tmp_path)

    shot = tmp_path / "shot.png"
    run = run_browser(binary, tmp_path / "profile-shot", "--window-size=1200,2400",
                      f"--screenshot={shot}", report_file.as_uri())
    assert run.returncode == 0 and shot.exists(), run.stderr[-2000:]
    from matplotlib.image import imread

    pixels = imread(shot)
    assert pixels.shape[0] == 2400 and pixels.shape[1] == 1200
    assert np.std(pixels[..., :3]) > 0.05  # text, tables and figures, not a blank page
