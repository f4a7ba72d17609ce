"""How to cite eddyhop and the published methods a result used: one table, shared by
``eddyhop cite``, ``CITATION.cff`` and ``docs/methods.md`` (both generated from it by
``python tools/gen_docs.py``; ``tests/test_citation.py`` checks that they are current).

Every reference below was written from memory (authors, title, journal, volume, pages, year
and DOI): it was not copied from a bibliographic database.  A DOI is given only where it was
recalled with confidence; check before submitting a paper.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from .. import __version__

SOFTWARE_TITLE = ("eddyhop: noisy tracer ensembles in cellular and jet flows "
                  "(regimes, crossovers, effective diffusivity and aging)")
SOFTWARE_AUTHOR = "The eddyhop developers"
SOFTWARE_LICENSE = "MIT"
RELEASE_DATE = "2026-12-04"  # of __version__; CHANGELOG.md gives the same date
ABSTRACT = ("eddyhop simulates large, reproducible ensembles of noisy tracers advected by model "
            "two-dimensional flows and turns them into labelled netCDF results about transport: "
            "mean-squared displacement, local exponent and regimes, crossover times, effective "
            "diffusivity with error bars, aging and cell-hopping statistics.")
KEYWORDS = ("tracer dispersion", "effective diffusivity", "anomalous diffusion",
            "cellular flow", "stochastic differential equations", "homogenization")


@dataclass(frozen=True)
class Reference:
    """One published work (authors as "Family, Given" strings)."""

    key: str
    authors: tuple
    title: str
    year: int
    journal: str = ""
    volume: str = ""
    issue: str = ""
    pages: str = ""
    publisher: str = ""
    doi: str = ""
    kind: str = "article"  # article | book | inproceedings

    def short(self) -> str:
        """Author-year label.

        >>> REFERENCES["strang1968"].short(), REFERENCES["majda1999"].short()
        ('Strang 1968', 'Majda & Kramer 1999')
        >>> REFERENCES["salmon2011"].short()
        'Salmon et al. 2011'
        """
        families = [a.split(",")[0] for a in self.authors]
        if len(families) == 1:
            who = families[0]
        elif len(families) == 2:
            who = f"{families[0]} & {families[1]}"
        else:
            who = f"{families[0]} et al."
        return f"{who} {self.year}"

    def text(self) -> str:
        """One-line plain citation: authors (year). Title. Journal volume(issue), pages. doi."""
        authors = "; ".join(self.authors)
        where = self.journal or self.publisher
        if self.volume:
            where += f" {self.volume}" + (f"({self.issue})" if self.issue else "")
        if self.pages:
            where += f", {self.pages}"
        if self.kind == "book" and self.publisher and self.journal:
            where += f", {self.publisher}"
        doi = f". doi:{self.doi}" if self.doi else ""
        return f"{authors} ({self.year}). {self.title}. {where}{doi}"

    def bibtex(self) -> str:
        fields = [("author", " and ".join(self.authors)), ("title", "{" + self.title + "}"),
                  ("year", str(self.year))]
        entry = {"article": "article", "book": "book", "inproceedings": "inproceedings"}[
            self.kind]
        if self.kind == "article":
            fields.append(("journal", self.journal))
        elif self.kind == "inproceedings":
            fields.append(("booktitle", self.journal))
        elif self.journal:
            fields.append(("series", self.journal))
        for name in ("volume", "issue", "pages", "publisher", "doi"):
            value = getattr(self, name)
            if value:
                fields.append(("number" if name == "issue" else name,
                               value.replace("–", "--") if name == "pages" else value))
        body = ",\n".join(f"  {name} = {{{value}}}" for name, value in fields)
        return f"@{entry}{{{self.key},\n{body}\n}}"


# All from memory (see the module docstring).  Spot checks against stored public pages:
# the Milstein paper's Russian original (Teor. Veroyatn. Primen. 19(3), 583–588, 1974; the
# English translation cited here is the 1975 volume 19), Aris 1956 (235, 67–77), and the titles
# of Talay & Tubaro 1990 and Rosenbluth et al. 1987; the rest is unchecked.
REFERENCES = {r.key: r for r in (
    Reference("strang1968", ("Strang, Gilbert",),
              "On the construction and comparison of difference schemes", 1968,
              journal="SIAM Journal on Numerical Analysis", volume="5", issue="3",
              pages="506–517", doi="10.1137/0705041"),
    Reference("maruyama1955", ("Maruyama, Gisiro",),
              "Continuous Markov processes and stochastic equations", 1955,
              journal="Rendiconti del Circolo Matematico di Palermo", volume="4",
              pages="48–90"),
    Reference("milstein1975", ("Mil'shtein, G. N.",),
              "Approximate integration of stochastic differential equations", 1975,
              journal="Theory of Probability and Its Applications", volume="19", issue="3",
              pages="557–562"),
    Reference("kloeden1992", ("Kloeden, Peter E.", "Platen, Eckhard"),
              "Numerical Solution of Stochastic Differential Equations", 1992,
              journal="Applications of Mathematics", volume="23", publisher="Springer",
              kind="book"),
    Reference("kutta1901", ("Kutta, Wilhelm",),
              "Beitrag zur näherungsweisen Integration totaler Differentialgleichungen", 1901,
              journal="Zeitschrift für Mathematik und Physik", volume="46", pages="435–453"),
    Reference("salmon2011", ("Salmon, John K.", "Moraes, Mark A.", "Dror, Ron O.",
                             "Shaw, David E."),
              "Parallel random numbers: as easy as 1, 2, 3", 2011,
              journal="Proceedings of the International Conference for High Performance "
                      "Computing, Networking, Storage and Analysis (SC11)",
              doi="10.1145/2063384.2063405", kind="inproceedings"),
    Reference("majda1999", ("Majda, Andrew J.", "Kramer, Peter R."),
              "Simplified models for turbulent diffusion: theory, numerical modelling, and "
              "physical phenomena", 1999, journal="Physics Reports", volume="314",
              issue="4–5", pages="237–574", doi="10.1016/S0370-1573(98)00083-0"),
    Reference("pavliotis2008", ("Pavliotis, Grigorios A.", "Stuart, Andrew M."),
              "Multiscale Methods: Averaging and Homogenization", 2008,
              journal="Texts in Applied Mathematics", volume="53", publisher="Springer",
              kind="book"),
    Reference("shraiman1987", ("Shraiman, Boris I.",),
              "Diffusive transport in a Rayleigh-Bénard convection cell", 1987,
              journal="Physical Review A", volume="36", issue="1", pages="261–267",
              doi="10.1103/PhysRevA.36.261"),
    Reference("rosenbluth1987", ("Rosenbluth, M. N.", "Berk, H. L.", "Doxas, I.",
                                 "Horton, W."),
              "Effective diffusion in laminar convective flows", 1987,
              journal="Physics of Fluids", volume="30", issue="9", pages="2636–2647"),
    Reference("aris1956", ("Aris, Rutherford",),
              "On the dispersion of a solute in a fluid flowing through a tube", 1956,
              journal="Proceedings of the Royal Society of London. Series A", volume="235",
              issue="1200", pages="67–77", doi="10.1098/rspa.1956.0065"),
    Reference("schwarz1978", ("Schwarz, Gideon",), "Estimating the dimension of a model", 1978,
              journal="The Annals of Statistics", volume="6", issue="2", pages="461–464",
              doi="10.1214/aos/1176344136"),
    Reference("efron1993", ("Efron, Bradley", "Tibshirani, Robert J."),
              "An Introduction to the Bootstrap", 1993, publisher="Chapman & Hall",
              kind="book"),
    Reference("giles2008", ("Giles, Michael B.",), "Multilevel Monte Carlo path simulation",
              2008, journal="Operations Research", volume="56", issue="3", pages="607–617",
              doi="10.1287/opre.1070.0496"),
    Reference("talay1990", ("Talay, Denis", "Tubaro, Luciano"),
              "Expansion of the global error for numerical schemes solving stochastic "
              "differential equations", 1990, journal="Stochastic Analysis and Applications",
              volume="8", issue="4", pages="483–509"),
    Reference("barkai2003", ("Barkai, Eli",),
              "Aging in subdiffusion generated by a deterministic dynamical system", 2003,
              journal="Physical Review Letters", volume="90", issue="10", pages="104101",
              doi="10.1103/PhysRevLett.90.104101"),
    Reference("castiglione1999", ("Castiglione, P.", "Mazzino, A.",
                                  "Muratore-Ginanneschi, P.", "Vulpiani, A."),
              "On strong anomalous diffusion", 1999, journal="Physica D", volume="134",
              pages="75–93"),
    Reference("vuong1989", ("Vuong, Quang H.",),
              "Likelihood ratio tests for model selection and non-nested hypotheses", 1989,
              journal="Econometrica", volume="57", issue="2", pages="307–333",
              doi="10.2307/1912557"),
    Reference("clauset2009", ("Clauset, Aaron", "Shalizi, Cosma Rohilla",
                              "Newman, M. E. J."),
              "Power-law distributions in empirical data", 2009, journal="SIAM Review",
              volume="51", issue="4", pages="661–703", doi="10.1137/070710111"),
)}


def _attr(name):
    return lambda attrs: str(attrs.get(name, ""))


def _step(name):
    return lambda attrs: name in str(attrs.get("analysis_steps", "")).split()


@dataclass(frozen=True)
class Method:
    """A published method eddyhop uses; ``used(attrs)`` tells from a result file's global
    attributes whether that file used it."""

    name: str
    where: str
    references: tuple
    used: object  # callable(attrs) -> bool


#: The one table of methods.  Order: engine (integrators, random numbers), reference
#: solvers, analyses.
METHODS = (
    Method("Strang splitting (exact noise half-steps around a midpoint-RK2 advection step)",
           "run.integrator = strang_rk2", ("strang1968",),
           lambda a: _attr("integrator")(a) == "strang_rk2"),
    Method("Euler–Maruyama scheme", "run.integrator = euler_maruyama",
           ("maruyama1955", "kloeden1992"),
           lambda a: _attr("integrator")(a) == "euler_maruyama"),
    Method("Milstein scheme", "run.integrator = milstein", ("milstein1975", "kloeden1992"),
           lambda a: _attr("integrator")(a) == "milstein"),
    Method("classical Runge–Kutta (fourth order)", "run.integrator = rk4", ("kutta1901",),
           lambda a: _attr("integrator")(a) == "rk4"),
    Method("Philox4x32-10 counter-based random numbers", "every noisy run",
           ("salmon2011",), lambda a: _attr("eddyhop_kind")(a) in ("monte_carlo", "sweep")),
    Method("homogenization cell problem for the effective diffusivity", "eddyhop reference; "
           "the cell-problem D_eff beside every analysed D_eff", ("majda1999", "pavliotis2008"),
           lambda a: _attr("eddyhop_kind")(a) == "reference"
           or _step("effective_diffusivity")(a)),
    Method("D_eff ∝ κ Pe^(1/2) boundary-layer scaling of cellular flows",
           "cellular families: D/(κ Pe^(1/2)) columns and asymptotes",
           ("shraiman1987", "rosenbluth1987"),
           lambda a: "cellular" in _attr("flow_family")(a)
           and (_step("effective_diffusivity")(a) or _attr("eddyhop_kind")(a) == "reference")),
    Method("moment (Aris) evolution of the noise-free reference", "eddyhop reference",
           ("aris1956",), lambda a: _attr("eddyhop_kind")(a) == "reference"),
    Method("regimes: segmented power-law fit, breakpoints by the Bayesian information "
           "criterion", "analyse: regimes", ("schwarz1978",), _step("regimes")),
    Method("regime exponent errors: bootstrap over particle batches, the segmentation "
           "repeated on every resample", "analyse: regime_alpha_se, regime_support",
           ("efron1993",), _step("regimes")),
    Method("jackknife / batch-means standard errors", "analyse: every error bar",
           ("efron1993",), lambda a: bool(_attr("analysis_steps")(a))),
    Method("step check: coupled coarse/fine paths on one Brownian path", "run.step_check",
           ("giles2008",), _step("step_check")),
    Method("Richardson extrapolation of the weak step-size error", "analyse: step_check "
           "(extrapolated D_eff)", ("talay1990",), _step("step_check")),
    Method("renewal aging form of the aged MSD", "analyse: aging", ("barkai2003",),
           _step("aging")),
    Method("moment spectrum of strong anomalous diffusion", "analyse: moment_spectrum",
           ("castiglione1999",), _step("moment_spectrum")),
    Method("residence-time tails: Vuong test between power law and exponential",
           "analyse: hopping", ("vuong1989", "clauset2009"), _step("hopping")),
)


def methods_used(attrs) -> list[Method]:
    """The :data:`METHODS` a result with global attributes ``attrs`` used.

    >>> [m.references for m in methods_used({"eddyhop_kind": "monte_carlo",
    ...                                       "integrator": "milstein"})]
    [('milstein1975', 'kloeden1992'), ('salmon2011',)]
    """
    return [m for m in METHODS if m.used(attrs)]


def _bibtex_key(version: str) -> str:
    return "eddyhop_" + re.sub(r"[^0-9A-Za-z]+", "_", version)


def software_bibtex(version: str = __version__) -> str:
    """BibTeX entry of eddyhop ``version``."""
    year = RELEASE_DATE[:4] if version == __version__ else ""
    fields = [("author", "{" + SOFTWARE_AUTHOR + "}"), ("title", "{" + SOFTWARE_TITLE + "}"),
              ("version", version), ("license", SOFTWARE_LICENSE)]
    if year:
        fields.insert(2, ("year", year))
    body = ",\n".join(f"  {name} = {{{value}}}" for name, value in fields)
    return f"@software{{{_bibtex_key(version)},\n{body}\n}}"


def _yaml_text(value: str) -> str:
    return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _cff_person(author: str) -> list[str]:
    family, _, given = (part.strip() for part in author.partition(","))
    lines = [f"  - family-names: {_yaml_text(family)}"]
    if given:
        lines.append(f"    given-names: {_yaml_text(given)}")
    return lines


def citation_cff(version: str = __version__) -> str:
    """The text of ``CITATION.cff`` (CFF 1.2.0) for ``version``, with every method reference
    of :data:`METHODS` under ``references``."""
    lines = ["# Generated from eddyhop/citation.py by `python tools/gen_docs.py`; do not edit.",
             "cff-version: 1.2.0",
             'message: "If you use eddyhop, please cite it as below, together with the '
             'methods your results used (`eddyhop cite RESULT.nc` lists them)."',
             "type: software", f"title: {_yaml_text(SOFTWARE_TITLE)}",
             "authors:", f"  - name: {_yaml_text(SOFTWARE_AUTHOR)}",
             f"version: {_yaml_text(version)}"]
    if version == __version__:
        lines.append(f"date-released: {_yaml_text(RELEASE_DATE)}")
    lines += [f"license: {SOFTWARE_LICENSE}", f"abstract: {_yaml_text(ABSTRACT)}", "keywords:"]
    lines += [f"  - {_yaml_text(k)}" for k in KEYWORDS]
    lines.append("references:")
    for key in _method_reference_keys():
        ref = REFERENCES[key]
        lines.append(f"  - type: {'book' if ref.kind == 'book' else 'article'}"
                     if ref.kind != "inproceedings" else "  - type: conference-paper")
        lines.append(f"    title: {_yaml_text(ref.title)}")
        lines.append("    authors:")
        lines += ["  " + line for line in _cff_person_lines(ref.authors)]
        lines.append(f"    year: {ref.year}")
        if ref.kind == "inproceedings":
            lines.append(f"    conference:\n      name: {_yaml_text(ref.journal)}")
        elif ref.kind == "book":
            if ref.journal:
                lines.append(f"    collection-title: {_yaml_text(ref.journal)}")
            if ref.publisher:
                lines.append(f"    publisher:\n      name: {_yaml_text(ref.publisher)}")
        else:
            lines.append(f"    journal: {_yaml_text(ref.journal)}")
        if ref.volume:
            lines.append(f"    volume: {_yaml_text(ref.volume)}")
        if ref.issue:
            lines.append(f"    issue: {_yaml_text(ref.issue)}")
        if ref.pages:
            start, _, end = ref.pages.partition("–")
            lines.append(f"    start: {_yaml_text(start)}")
            if end:
                lines.append(f"    end: {_yaml_text(end)}")
        if ref.doi:
            lines.append(f"    doi: {_yaml_text(ref.doi)}")
    return "\n".join(lines) + "\n"


def _cff_person_lines(authors) -> list[str]:
    out = []
    for author in authors:
        out += _cff_person(author)
    return out


def _method_reference_keys() -> list[str]:
    return list(dict.fromkeys(key for m in METHODS for key in m.references))


def methods_markdown() -> str:
    """The text of ``docs/methods.md``: the method table and the references in full."""
    lines = ["# Methods and how to cite them", "",
             "<!-- Generated from src/eddyhop/citation.py by `python tools/gen_docs.py`; "
             "do not edit. -->", "",
             "`eddyhop cite` prints the citation of the installed version; `eddyhop cite "
             "RESULT.nc` prints the citation of the version that wrote RESULT.nc and of the "
             "published methods it used (from this table).  All references were written from "
             "memory; a DOI is given only where recalled with confidence.", "",
             "## How to cite eddyhop", "", "```bibtex", software_bibtex(), "```", "",
             "## Methods", "", "| method | used by | references |", "|---|---|---|"]
    for m in METHODS:
        refs = "; ".join(REFERENCES[k].short() for k in m.references)
        lines.append(f"| {m.name} | {m.where} | {refs} |")
    lines += ["", "## References", ""]
    for key in sorted(_method_reference_keys(), key=lambda k: REFERENCES[k].short()):
        lines.append(f"- {REFERENCES[key].text()}")
    return "\n".join(lines) + "\n"


def cite_text(attrs=None, fmt: str = "bibtex") -> str:
    """What ``eddyhop cite`` prints: the software entry (for the version in ``attrs``, or the
    installed one) and, given a result's global ``attrs``, the methods it used, in ``fmt``
    (``bibtex``, ``cff`` or ``text``)."""
    version = str(attrs.get("eddyhop_version", __version__)) if attrs else __version__
    if fmt == "cff":
        return citation_cff(version)
    used = methods_used(attrs) if attrs else []
    if fmt == "bibtex":
        blocks = [software_bibtex(version)]
        keys = list(dict.fromkeys(k for m in used for k in m.references))
        if used:
            blocks.append("% methods this result used:\n" + "\n".join(
                f"%   {m.name}: {', '.join(m.references)}" for m in used))
        blocks += [REFERENCES[k].bibtex() for k in keys]
        return "\n\n".join(blocks) + "\n"
    lines = [f"{SOFTWARE_AUTHOR} ({RELEASE_DATE[:4] if version == __version__ else 'n.d.'}). "
             f"{SOFTWARE_TITLE}. Version {version}. License {SOFTWARE_LICENSE}."]
    for m in used:
        lines.append(f"- {m.name} ({m.where}):")
        lines += [f"    {REFERENCES[k].text()}" for k in m.references]
    return "\n".join(lines) + "\n"
