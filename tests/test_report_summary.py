"""The report's opening summary (the same text `eddyhop analyse` prints), the per-point sweep
tables, no internal names, one warning per issue, the paper tables, and a real browser at
1400 and 420 px: no horizontal overflow of the page, the summary present, every figure
loaded."""

from __future__ import annotations

import html
import re
import warnings

import numpy as np
import pytest

import eddyhop
from eddyhop.presentation.report import build_report, plain_words, write_report
from eddyhop.presentation.report_summary import (
    lines_html,
    round_to_error,
    rows_csv,
    rows_latex,
    summary_rows,
)
from eddyhop.presentation.text import analysis_lines
from tests.conftest import make_study
from tests.test_report import chromium, run_browser

INTERNAL_NAMES = ("ShortRunWarning", "StepBiasWarning", "run.particles", "deff_converged =",
                  "settled->diffusive", "D_eff_over_kappa")


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    """A short cellular run at Pe = 10 with two starts and hopping, analysed."""
    from eddyhop.analysis import analyse

    study = make_study(
        title="summary test run",
        start=[{"kind": "uniform", "label": "anywhere"},
               {"kind": "box", "label": "corner", "x_min": 0.0, "x_max": 0.3, "y_min": 0.0,
                "y_max": 0.3}],
        run={"particles": 256, "dt": 0.02, "t_end": 10.0, "n_times": 14, "seed": 99},
        hopping={"enabled": True},
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = analyse(eddyhop.simulate(study))
    path = tmp_path_factory.mktemp("summary") / "run.nc"
    eddyhop.write_netcdf(ds, path)
    return path, ds


@pytest.fixture(scope="module")
def page(analysed):
    path, _ = analysed
    return write_report(path, path.with_name("run.html"), reference=False)


def test_summary_opens_the_report_with_the_analyse_text(analysed, page):
    _, ds = analysed
    text = page.read_text(encoding="utf-8")
    summary = text.index("id='summary'")
    assert summary < text.index("id='warnings'") < text.index("id='parameters'")
    # every line `eddyhop analyse` prints (without the reference solve) is in the summary
    for line in analysis_lines(ds, reference=False):
        shown = re.sub(r"\s+", " ", html.escape(line.strip(), quote=True))
        plain = re.sub(r"<[^>]+>", "", text[summary:text.index("id='warnings'")])
        assert shown in re.sub(r"\s+", " ", plain), line
    assert "start &#x27;anywhere&#x27;" in text and "start &#x27;corner&#x27;" in text
    assert "hopping:" in text and "D_eff/(κ Pe^½)" in text


def test_no_internal_names_before_the_provenance(page):
    text = page.read_text(encoding="utf-8")
    shown = text[:text.index("id='provenance'")]
    for name in INTERNAL_NAMES:
        assert name not in shown, name


def test_loud_words_become_alerts():
    lines = ["start 'a':", "  D_eff: UNDETERMINED: too noisy", "    D_xx = 1", "  next"]
    out = lines_html(lines)
    assert "<strong class='alert'>UNDETERMINED</strong>" in out
    assert out.count("<ul>") == out.count("</ul>") == 2
    assert out.startswith("<p class='summary-head'><b>start &#x27;a&#x27;:</b></p>")


def test_warning_class_names_and_flag_codes_are_said_in_words():
    text = plain_words("analysis (ShortRunWarning) at 2 point(s); deff_converged = 2 "
                       "(undetermined) — more")
    assert text == "analysis (run too short) at 2 point(s); undetermined — more"


def test_one_warning_names_every_point_it_concerns(analysed):
    _, ds = analysed
    flags = ds["deff_converged"].copy()
    too_short = next(int(v) for v, m in zip(flags.attrs["flag_values"],
                                        flags.attrs["flag_meanings"].split())
                 if m == "too_short")
    ds = ds.assign(deff_converged=flags.copy(data=np.full(flags.shape, too_short,
                                                          dtype=flags.dtype)))
    text = build_report(ds, analyse=False, reference=False, figures=[])
    assert text.count("Run too short at") == 1
    assert "start = anywhere; start = corner" in text


@pytest.mark.parametrize("value, error, expected", [
    (0.23381, 0.0192, "0.234 ± 0.019"), (4.6757, 0.37, "4.68 ± 0.37"),
    (1234.5, 56.0, "1234 ± 56"), (123456.0, 2345.0, "123500 ± 2300"),
    (0.5, float("nan"), "0.5"), (float("nan"), 0.1, "n/a")])
def test_values_are_rounded_to_their_uncertainty(value, error, expected):
    assert round_to_error(value, error) == expected


def test_paper_tables(analysed):
    _, ds = analysed
    rows = summary_rows(ds)
    quantities = {(r["start"], r["quantity"]) for r in rows}
    assert ("anywhere", "D_eff") in quantities and ("corner", "D_xx") in quantities
    csv_text = rows_csv(rows)
    assert csv_text.splitlines()[:2] == ["# eddyhop summary table",
                                         "start,quantity,value,error,status,shown"]
    latex = rows_latex(rows, caption="D_eff of the test run")
    for rule in (r"\toprule", r"\midrule", r"\bottomrule"):
        assert latex.count(rule) == 1
    assert r"\pm" in latex and r"$D_\mathrm{eff}$" in latex and r"D\_eff" in latex
    claimed = [r for r in rows if r["status"] in ("too_short", "bounded")]
    assert all(np.isnan(r["value"]) for r in claimed)  # nothing claimed, nothing shown


# ---- a real browser at two widths ------------------------------------------------------------
# Headless Chromium will not open a window narrower than 500 px, so the report is loaded in an
# iframe of the asked width inside a host page; a probe in the report measures its own page and
# posts the result to the host, which writes it into its DOM for --dump-dom.
WIDTH_PROBE = """<script>
window.addEventListener('load', function () {
  var page = document.documentElement;
  var images = Array.prototype.slice.call(document.images);
  var broken = images.filter(function (i) { return !(i.complete && i.naturalWidth > 0); });
  parent.postMessage('overflow=' + (page.scrollWidth - page.clientWidth)
    + ';summary=' + document.querySelectorAll('[data-summary]').length
    + ';width=' + window.innerWidth + ';images=' + images.length + ';broken=' + broken.length
    + ';tables=' + document.querySelectorAll('table').length
    + ';wrapped=' + document.querySelectorAll('.table-scroll > table').length, '*');
});
</script>"""
HOST = """<!DOCTYPE html><html><body style="margin:0">
<iframe src="{src}" style="width:{width}px;height:900px;border:0"></iframe>
<script>window.addEventListener('message', function (e) {{
  document.body.setAttribute('data-probe', e.data); }});</script></body></html>"""


@pytest.mark.parametrize("width", [1400, 420])
def test_report_fits_the_screen_in_headless_chromium(page, tmp_path, width):
    binary = chromium()
    text = page.read_text(encoding="utf-8")
    probed = tmp_path / f"probed-{width}.html"
    probed.write_text(text.replace("<head>", "<head>" + WIDTH_PROBE, 1), encoding="utf-8")
    host = tmp_path / f"host-{width}.html"
    host.write_text(HOST.format(src=probed.name, width=width), encoding="utf-8")
    dom = run_browser(binary, tmp_path / f"profile-{width}", "--window-size=1500,1000",
                      "--virtual-time-budget=8000", "--dump-dom", host.as_uri())
    assert dom.returncode == 0, dom.stderr[-2000:]
    match = re.search(r'data-probe="([^"]*)"', dom.stdout)
    assert match, dom.stdout[:500]
    probe = dict(item.split("=", 1) for item in match.group(1).split(";"))
    assert abs(int(probe["width"]) - width) <= 20, probe  # the page is as narrow as asked
    assert int(probe["overflow"]) <= 0, probe  # the page itself never scrolls sideways
    assert probe["summary"] == "1" and probe["broken"] == "0" and int(probe["images"]) >= 2
    # every table scrolls inside its own container
    assert probe["tables"] == probe["wrapped"], probe
