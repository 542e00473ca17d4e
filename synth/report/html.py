"""The run report: one self-contained HTML page per run (no server, no network).

Every figure of the run folder is embedded as a base64 ``data:`` URI, the style is a short
inline ``<style>`` block, and there is no script, external font or link to fetch, so the page
can be mailed or archived alone. Every string from the run (names, notes, the config) is
escaped with :func:`html.escape`. docs/report.md describes each section.
"""

import base64
import glob
import html
import json
import os
import platform
import re
import sys

from ..fitsio import write_text
from .run_analysis import PLAN_COLUMNS, SURVIVAL_COLUMNS, cell_text, plan_cells

__all__ = ["write_report", "report_html", "REPORT_NAME", "typeset_line"]

#: file name of the page inside the run folder
REPORT_NAME = "report.html"

_CSS = """
body{font-family:sans-serif;max-width:1100px;margin:1em auto;padding:0 1em;color:#222;
line-height:1.4}
h1{border-bottom:2px solid #456}h2{border-bottom:1px solid #aab;margin-top:2em}
table{border-collapse:collapse;margin:.5em 0;font-size:.85em}
td,th{border:1px solid #ccd;padding:2px 6px;text-align:right}
th{background:#eef}td.t,th.t{text-align:left}
pre{background:#f6f6f8;padding:.6em;overflow-x:auto;font-size:.8em;max-height:30em}
figure{display:inline-block;margin:.3em;vertical-align:top}
figure img{max-width:100%;border:1px solid #ddd}
figcaption{font-size:.8em;color:#555}
.row{display:flex;flex-wrap:wrap;gap:.5em}.row figure{flex:1 1 45%}
.note{background:#fff6d6;border-left:4px solid #d9a400;padding:.5em .8em}
.yes{color:#070;font-weight:bold}.no{color:#a00;font-weight:bold}
"""

_e = html.escape


class _Page:
    """Collects HTML parts and the figures embedded so far."""

    def __init__(self, run_dir):
        self.run_dir = run_dir
        self.parts = []
        self.used = set()

    def add(self, text):
        self.parts.append(text)

    def img(self, name, caption):
        """A <figure> with the PNG embedded, or nothing if the run has no such file."""
        path = os.path.join(self.run_dir, str(name or ""))
        if not name or not os.path.isfile(path):
            return ""
        self.used.add(os.path.basename(path))
        with open(path, "rb") as fh:
            data = base64.b64encode(fh.read()).decode("ascii")
        return (f'<figure><img src="data:image/png;base64,{data}" alt="{_e(caption)}">'
                f"<figcaption>{_e(caption)}</figcaption></figure>")


def _table(head, rows, left=1):
    """An HTML table; the first ``left`` columns are text (left-aligned)."""
    def cls(i):
        return ' class="t"' if i < left else ""
    out = ["<table><tr>" + "".join(f"<th{cls(i)}>{_e(str(h))}</th>"
                                   for i, h in enumerate(head)) + "</tr>"]
    for r in rows:
        out.append("<tr>" + "".join(f"<td{cls(i)}>{c if isinstance(c, _Raw) else _e(str(c))}"
                                    "</td>" for i, c in enumerate(r)) + "</tr>")
    return "".join(out) + "</table>"


class _Raw(str):
    """A cell already written as HTML."""


def _fmt(v, fmt="{:.4g}"):
    if v is None or (isinstance(v, float) and v != v):
        return "-"
    return fmt.format(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else str(v)


_SUPER = str.maketrans("0123456789+-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁺⁻")
_SUB = str.maketrans("0123456789", "₀₁₂₃₄₅₆₇₈₉")


def typeset_line(line):
    """A line as astronomers write it: "HCO+ 1-0" -> "HCO⁺ 1–0", "13CO 1-0" -> "¹³CO 1–0",
    "C18O" -> "C¹⁸O", "N2H+" -> "N₂H⁺". In the species a run of two or more digits is a mass
    number (superscript), a single digit a count of atoms (subscript), a trailing charge a
    superscript; the transition's hyphen becomes an en dash. Text without a species and a
    transition is returned unchanged."""
    parts = str(line).split(" ", 1)
    if len(parts) != 2 or not re.fullmatch(r"[A-Za-z0-9]+[+-]?", parts[0]):
        return str(line)
    species, transition = parts
    charge = ""
    if species[-1] in "+-":
        species, charge = species[:-1], species[-1].translate(_SUPER)
    species = re.sub(r"\d+", lambda m: m.group(0).translate(_SUPER if len(m.group(0)) > 1
                                                             else _SUB), species)
    transition = re.sub(r"(?<=\d)-(?=\d)", "–", transition)
    return f"{species}{charge} {transition}"


def _line_of(s, tname):
    """The typeset line of a tracer of the run (its name if the summary has no line)."""
    line = (s.get("tracers") or {}).get(tname, {}).get("line")
    return typeset_line(line) if line else tname


def _job(page, s):
    an = s.get("analysis") or {}
    page.add('<h2 id="job">Job</h2>')
    rows = [(name, _line_of(s, name), t.get("excitation"), _fmt(t.get("abundance")),
             _fmt(t.get("frequency_ghz"), "{:.4f}"), _fmt(t.get("peak_tb_k")),
             _fmt(t.get("peak_integrated_k_kms")), _fmt(t.get("tau_max")))
            for name, t in s.get("tracers", {}).items()]
    page.add(f"<p>{len(rows)} tracer(s), {len(s.get('setups') or {})} setup(s); "
             f"snapshot shape {_e(str(s.get('snapshot', {}).get('shape')))}; "
             f"run time {_e(_fmt(s.get('elapsed_s'), '{:.1f}'))} s; "
             f"date {_e(str(an.get('date', '-')))}.</p>")
    reused = [(n, t["reused_from"]) for n, t in s.get("tracers", {}).items()
              if t.get("reused_from")]
    if reused:
        page.add("<p>Ideal cubes reused from an earlier run (same inputs; docs/guide.md): "
                 + "; ".join(f"{_e(n)} from {_e(p)}" for n, p in reused) + ".</p>")
    page.add(_table(("tracer", "line", "excitation", "abundance", "GHz", "peak T_B (K)",
                     "peak ∫T dv (K km/s)", "max tau"), rows, left=3))
    obs = [(sname, tname, e.get("unit"), _fmt(e.get("beam_major_arcsec"), "{:.3g}"),
            _fmt(e.get("beam_minor_arcsec"), "{:.3g}"), _fmt(e.get("noise_rms"), "{:.3g}"),
            _fmt(e.get("peak"), "{:.3g}"), e.get("channels"), e.get("n_pointings", "-"),
            _fmt(e.get("pixel_arcsec"), "{:.3g}"),
            "x".join(str(n) for n in e.get("map_shape", [])[::-1]) or "-")
           for sname, per in (s.get("setups") or {}).items() for tname, e in per.items()]
    if obs:
        page.add(_table(("setup", "tracer", "unit", "beam major (\")", "beam minor (\")",
                         "noise rms", "peak", "channels", "pointings", "pixel (\")",
                         "map (pixels)"), obs, left=3))


def _config(page, s):
    page.add('<h2 id="config">Configuration</h2>')
    text = json.dumps(s.get("config", {}), indent=2, sort_keys=False, default=str)
    page.add(f"<pre>{_e(text)}</pre>")


def _tracers(page, s):
    an = s.get("analysis") or {}
    page.add('<h2 id="tracers">Tracers: ideal and observed</h2>')
    page.add("<p>\"ideal\" in the observed panels is the ideal cube as the observation "
             "should see it: on the observed channels, convolved to the observed beam and in "
             "the observed unit (the reference of docs/analysis.md).</p>")
    for tname, t in an.get("tracers", {}).items():
        figs = t.get("figures", {})
        pos = ", ".join(f"({x}, {y})" for x, y in t.get("spectra_positions", []))
        line = _line_of(s, tname)
        page.add(f"<h3>{_e(line)}</h3><div class=\"row\">"
                 + page.img(figs.get("mom0"), f"{tname}: ideal integrated intensity")
                 + page.img(figs.get("spectra"), f"{tname}: ideal spectra at pixels {pos}")
                 + "</div>")
        for sname, o in t.get("setups", {}).items():
            of = o.get("figures", {})
            page.add(f"<h4>{_e(line)} with {_e(sname)}</h4><div class=\"row\">"
                     + page.img(of.get("mom0"), f"{tname} with {sname}: ideal vs observed "
                                "integrated intensity (each in its own unit)")
                     + page.img(of.get("moments"), f"{tname} with {sname}: moments 0 and 1, "
                                "reference vs observed")
                     + page.img(of.get("spectra"), f"{tname} with {sname}: spectra, "
                                "reference vs observed") + "</div>")
            if o.get("notes"):
                page.add("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in o["notes"]) + "</ul>")
        if figs.get("recovery"):
            page.add(page.img(figs["recovery"], f"{tname}: recovered fraction of power per "
                              "angular scale, one curve per setup (dotted: half-recovery scale)"))


def _instruments(page, s):
    uv = (s.get("analysis") or {}).get("uv", {})
    setups = s.get("setups") or {}
    layouts = [(n, f"layout_{n}.png") for n in setups
               if os.path.exists(os.path.join(page.run_dir, f"layout_{n}.png"))]
    if not uv and not layouts:
        return
    page.add('<h2 id="instruments">Maps, pointings and uv coverage</h2>')
    if layouts:
        page.add("<p>What each setup maps: an array's pointings (their primary-beam half-power "
                 "circles; green: where the mosaic's response is 1/2) or a dish's on-the-fly "
                 "map positions and guard band, over the model's integrated intensity. The "
                 "planning table counts these pointings.</p><div class=\"row\">")
        for sname, name in layouts:
            first = next(iter(setups[sname].values()), {})
            page.add(page.img(name, f"{sname}: {first.get('layout', '')}"))
        page.add("</div>")
    if uv:
        page.add('<div class="row">')
        for sname, name in uv.items():
            page.add(page.img(name, f"{sname}: uv coverage and synthesized beam"))
        page.add("</div>")


def _survival(page, s):
    rows = (s.get("analysis") or {}).get("survival", [])
    page.add('<h2 id="survival">Survival matrix</h2>')
    if not rows:
        page.add("<p>No observing setups in this run: nothing to assess.</p>")
        return
    page.add("<p>One row per tracer and setup (survival.csv, survival.json). flux: observed / "
             "ideal total flux; flux (PB): the same inside the primary-beam half-power circle; "
             "half-scale: the largest angular scale still recovered at half power ('&gt;' = "
             "never dropped below half, a lower limit); fidelity: median over the emitting "
             "voxels; peak S/N; &gt;3 sigma: share of emitting voxels detected; r(mom0): "
             "correlation of the moment-0 maps. survives = peak S/N &ge; 5 and flux &ge; 0.5 "
             "(a plain rule of our own). Definitions: docs/analysis.md.</p>")
    body = []
    for r in rows:
        cells = [cell_text(r, k, f) for k, _, f in SURVIVAL_COLUMNS]
        ok = r.get("survives")
        cells[-1] = _Raw(f'<span class="{"yes" if ok else "no"}">{"yes" if ok else "no"}</span>')
        body.append(cells)
    page.add(_table([h for _, h, _ in SURVIVAL_COLUMNS], body, left=2))


def _statistics(page, s):
    """Survival of statistics ([analysis] statistics = true; synth/report/run_statistics.py)."""
    st = (s.get("analysis") or {}).get("statistics")
    if not st:
        return
    page.add('<h2 id="statistics">Survival of statistics</h2>')
    page.add("<p>Each statistic measured alike on the ideal cube (the model on the observed "
             "grid, at its own resolution) and on the observed cube, with the observed beam "
             "and noise setting the fitting ranges and thresholds. observed: mean over the "
             "noise realisations, uncertainty = their spread and the fit error in "
             "quadrature; shift in sigma = (observed - ideal) / (both uncertainties in "
             "quadrature). statistics.csv holds these rows, statistics.txt the lines. "
             "Definitions: docs/analysis.md.</p>")
    page.add(page.img("statistics.png", "|shift| / uncertainty per statistic, tracer x setup"))
    body = [[r["tracer"], r["setup"], r["statistic"],
             _fmt(r["ideal"]) + " ± " + _fmt(r["ideal_err"], "{:.2g}"),
             _fmt(r["observed"]) + " ± " + _fmt(r["observed_err"], "{:.2g}"),
             _fmt(r["shift_sigma"], "{:+.1f}"), _fmt(r["realisations"], "{}")]
            for r in st.get("rows", [])]
    page.add(_table(["tracer", "setup", "statistic", "ideal", "observed", "shift (σ)", "N"],
                    body, left=3))
    page.add("<ul>" + "".join(f"<li>{_e(r['line'])}</li>" for r in st.get("rows", [])
                              if abs(r.get("shift_sigma") or 0) >= 1) + "</ul>")
    truth = st.get("truth") or {}
    if truth:
        from ..analysis.statistics import TRUE_STATISTICS
        page.add("<p>True values from the snapshot along the line of sight (what the tracers "
                 "see of them):</p>")
        page.add(_table(["quantity", "value", "unit", "meaning"],
                        [[k, _fmt(v), TRUE_STATISTICS[k][0], TRUE_STATISTICS[k][1]]
                         for k, v in truth.items()], left=1))
    elif st.get("truth_note"):
        page.add(f'<p class="note">{_e(st["truth_note"])}</p>')


def _sweep(page, s):
    sw = (s.get("analysis") or {}).get("sweep")
    if not sw:
        return
    keys = ", ".join(f"{k} = {v}" for k, v in sw.get("keys", {}).items())
    page.add('<h2 id="sweep">Sweep</h2>')
    page.add(f"<p>Setups expanded over {_e(keys)} ([sweep]); sweep.csv holds their survival "
             "rows with a column per swept key. Each figure draws the survival metrics "
             "against one swept key: one line per tracer and per value of the other swept "
             "keys.</p>")
    for base, figs in sw.get("figures", {}).items():
        page.add('<div class="row">' + "".join(
            page.img(f, f"setup '{base}': survival metrics against {k}")
            for k, f in figs.items()) + "</div>")


def _planning(page, s):
    an = s.get("analysis") or {}
    rows = an.get("plan", [])
    page.add('<h2 id="planning">Planning estimates</h2>')
    page.add(f'<p class="note">{_e(an.get("disclaimer", ""))}</p>')
    if not rows:
        page.add("<p>No observing setups in this run: nothing to plan.</p>")
    st = an.get("settings", {})
    page.add(f"<p>Target: S/N {_e(_fmt(st.get('target_snr'), '{:g}'))} per channel on the "
             f"{_e(_fmt(st.get('percentile'), '{:g}'))}th percentile of the emitting voxels "
             "(above the emission floor, at each setup's resolution); rms(time) is the noise "
             "per channel in the time shown; a combination is planned for its own array. "
             "largest scale: the largest recoverable scale, 0.6 lambda / shortest baseline. Methods: docs/planning.md. plan.csv and "
             "plan.txt hold the same rows.</p>")
    body = plan_cells(rows)
    if body:
        page.add(_table([h for _, h, _ in PLAN_COLUMNS], body, left=2))
    for sk in an.get("plan_skipped", []):
        page.add(f"<p>not planned: {_e(sk['setup'])} / {_e(sk['tracer'])}: "
                 f"{_e(sk['reason'])}</p>")


def _versions():
    out = {"python": platform.python_version(), "platform": platform.platform()}
    for mod in ("numpy", "astropy", "spectral_cube", "radio_beam", "matplotlib", "scipy"):
        m = sys.modules.get(mod)
        if m is None:
            try:
                m = __import__(mod)
            except ImportError:
                continue
        out[mod] = getattr(m, "__version__", "?")
    return out


def _provenance(page, s):
    an = s.get("analysis") or {}
    page.add('<h2 id="provenance">Provenance</h2>')
    rows = [("synth version", s.get("synth_version")), ("config hash", s.get("config_hash")),
            ("date (UTC)", an.get("date")), ("elapsed (s)", _fmt(s.get("elapsed_s"), "{:.2f}"))]
    rows += list(_versions().items())
    page.add(_table(("item", "value"), rows, left=2))
    page.add("<p>Every FITS file of the run records SYNTHVER and CONFHASH in its header; "
             "summary.json holds this page's numbers.</p>")


def _others(page):
    rest = sorted(os.path.basename(p) for p in glob.glob(os.path.join(page.run_dir, "*.png"))
                  if os.path.basename(p) not in page.used)
    if rest:
        page.add('<h2 id="other">Other figures</h2><div class="row">'
                 + "".join(page.img(name, name) for name in rest) + "</div>")


def report_html(run_dir, summary):
    """The report page of a run folder as an HTML string (figures read from ``run_dir``)."""
    page = _Page(run_dir)
    title = f"synth run {summary.get('config_hash', '')}"
    page.add(f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
             f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>")
    page.add(f"<h1>{_e(title)}</h1><p>"
             + " · ".join(f'<a href="#{a}">{b}</a>' for a, b in (
                 ("job", "job"), ("config", "configuration"), ("tracers", "tracers"),
                 ("instruments", "maps and uv coverage"), ("survival", "survival matrix"),
                 ("sweep", "sweep"),
                 ("planning", "planning"), ("provenance", "provenance"))) + "</p>")
    for section in (_job, _config, _tracers, _instruments, _survival, _statistics, _sweep, _planning,
                    _provenance):
        section(page, summary)
    _others(page)
    page.add("</body></html>\n")
    return "".join(page.parts)


def write_report(run_dir, summary, log=None):
    """Write ``report.html`` into the run folder (atomically); return its path."""
    from ..rundir import run_path
    path = run_path(run_dir, REPORT_NAME)
    write_text(report_html(run_dir, summary), path)
    if log is not None:
        log(f"run report: {REPORT_NAME} in the output folder (one self-contained page)")
    return path
