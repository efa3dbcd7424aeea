"""Self-contained HTML pages: one per star, and a vetting page per results folder.

A period goes into a paper only after someone has looked at the light curve,
the model, the periodograms and the posterior. The per-star page gathers the
summary table (values with intervals and units), the flags explained in words,
the figures (embedded as data URIs, so the page works offline and can be mailed),
the diagnostics and the configuration and provenance. The vetting page lists
every star of a results folder in a sortable table with thumbnails and links,
so a person can vet hundreds of stars quickly. No page loads anything from the
network.
"""

from __future__ import annotations

import base64
import html
import json
import math
import os
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

from .errors import InputError
from .summarise import BASELINE_NAMES, false_alarm_text

__all__ = [
    "SUMMARY_NAME",
    "find_star_folders",
    "lookup",
    "write_star_page",
    "write_vetting_page",
]

SUMMARY_NAME = "summary.json"
STAR_PAGE = "index.html"
VETTING_PAGE = "vetting.html"
THUMBNAIL = "thumbnail.png"

# Figures a star folder may hold, in the order shown, with a caption each.
FIGURES = (
    ("summary.png", "Light curve with masked points and flares, GP predictive mean and band; "
                    "periodograms with the posterior period band; folded light curve."),
    ("scan.png", "Light curve, Lomb-Scargle periodogram with its peaks, and autocorrelation "
                 "function with the selected peaks."),
    ("corner.png", "Posterior of period, amplitude and coherence time."),
    ("traces.png", "Chains of every independent ensemble (convergence by eye)."),
)

_STYLE = """
body{font-family:system-ui,sans-serif;margin:1.5em;max-width:1200px;color:#222}
h1{font-size:1.5em}h2{font-size:1.15em;margin-top:1.6em;border-bottom:1px solid #ccc}
table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #ccc;padding:3px 8px;
text-align:left;vertical-align:top}th{background:#f3f3f3}
th.sortable{cursor:pointer}th.sortable:after{content:" \\21C5";color:#999}
.flag{padding:1px 6px;border-radius:3px;font-weight:600}
.good{background:#d8f0d8}.warn{background:#fde7c4}.bad{background:#f6cccc}
figure{margin:1em 0}figure img{max-width:100%;border:1px solid #ddd}
figcaption{font-size:.9em;color:#555}pre{background:#f7f7f7;padding:.6em;overflow:auto;
font-size:.85em}img.thumb{height:70px}
"""

_SORT_SCRIPT = """
document.querySelectorAll('table.sortable').forEach(function(table){
  table.querySelectorAll('th.sortable').forEach(function(th, col){
    th.addEventListener('click', function(){
      var body = table.tBodies[0];
      var rows = Array.prototype.slice.call(body.rows);
      var asc = th.dataset.order !== 'asc';
      rows.sort(function(a, b){
        var x = a.cells[col].dataset.sort, y = b.cells[col].dataset.sort;
        var nx = parseFloat(x), ny = parseFloat(y);
        var c = (!isNaN(nx) && !isNaN(ny)) ? nx - ny : String(x).localeCompare(String(y));
        return asc ? c : -c;
      });
      rows.forEach(function(r){ body.appendChild(r); });
      th.dataset.order = asc ? 'asc' : 'desc';
    });
  });
});
"""


def lookup(mapping: Mapping[str, Any] | None, dotted: str, default: Any = None) -> Any:
    """Value at a dotted path such as ``"period.interval_68"``, or ``default`` when absent."""
    node: Any = mapping
    for part in dotted.split("."):
        if not isinstance(node, Mapping) or part not in node:
            return default
        node = node[part]
    return node


def _finite(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def _fmt(x: Any, digits: int = 4) -> str:
    if _finite(x):
        return f"{x:.{digits}g}"
    if x is None:
        return "—"
    return html.escape(str(x))


def _interval(iv: Any, unit: str) -> str:
    if isinstance(iv, list | tuple) and len(iv) == 2 and all(_finite(v) for v in iv):
        return f"{_fmt(iv[0])} – {_fmt(iv[1])} {unit}"
    return "—"


def _pm(values: Any, unit: str = "d") -> str:
    """'± a, ± b d' for a list of standard errors (two significant digits)."""
    if isinstance(values, list | tuple) and values and all(_finite(v) for v in values):
        return ", ".join(f"± {_fmt(v, 2)}" for v in values) + f" {unit}"
    return "—"


def _data_uri(path: Path) -> str:
    return "data:image/png;base64," + base64.b64encode(path.read_bytes()).decode("ascii")


def _yesno(value: Any, good_when: bool = True) -> str:
    if value is None:
        return '<span class="flag warn">unknown</span>'
    ok = bool(value) == good_when
    return f'<span class="flag {"good" if ok else "bad"}">{"yes" if value else "no"}</span>'


def _flag_sentences(summary: Mapping[str, Any]) -> list[str]:
    """The flags of a summary, explained in words a reader can act on."""
    out = []
    detected = summary.get("detected")
    if detected is False:
        out.append(
            "No rotation signal: the periodic model is not preferred over the aperiodic one "
            "at the configured threshold. The period posterior below is what the periodic model "
            "would say if forced; do not publish it as a detection."
        )
    elif detected:
        fap = false_alarm_text(summary.get("detection"))
        extra = f" (false-alarm rate at this threshold on simulated null stars: {fap})" \
            if fap else ""
        out.append("A rotation signal is detected" + extra + ".")
    if summary.get("converged") is False:
        multiple = lookup(summary, "config.sampler.tau_multiple")
        length = f"over {multiple:g}" if _finite(multiple) else "over the required number of"
        out.append(
            f"NOT CONVERGED: the chains did not meet the convergence rule (length {length} "
            "autocorrelation times and split R-hat across independent ensembles below the "
            "threshold). Intervals may be too narrow or in the wrong place; rerun with a larger "
            "step cap ([sampler] max_steps) into the same folder: the stored chains "
            "(chains.h5) are extended, not sampled again."
        )
    harmonic = summary.get("harmonic") or {}
    if harmonic.get("flag"):
        reasons = []
        # summaries written before the baseline clause carry only "flag"
        if harmonic.get("flag_posterior", not harmonic.get("baselines")):
            reasons.append(
                "the posterior gives non-negligible probability to a period near half (P/2: "
                f"{_fmt(harmonic.get('probability_half'))}) or double (2P: "
                f"{_fmt(harmonic.get('probability_double'))}) the reported one")
        for b in harmonic.get("baselines") or []:
            reasons.append(
                f"the {BASELINE_NAMES.get(b.get('method'), b.get('method'))} period "
                f"({_fmt(b.get('period'))} d) is near {b.get('relation')} of the reported one")
        out.append(
            f"Harmonic warning: {'; '.join(reasons)}. Two spot groups on opposite "
            "hemispheres make two dips per rotation; a repeating pattern is also periodic at "
            "twice its period. Check the folded light curve at both periods."
        )
    sampling = summary.get("sampling") or {}
    if sampling.get("flag"):
        at = max(sampling.get("periodicities") or [{}], key=lambda q: q.get("probability", 0))
        what = ("the spacing of its recurring gaps" if at.get("source") == "gaps" else
                f"spectral-window power {_fmt(at.get('power'))}")
        out.append(
            "Sampling warning: the posterior puts "
            f"{_fmt(sampling.get('probability'))} of its probability within "
            f"{100 * sampling.get('tolerance', 0):.0f} % of a periodicity of the sampling "
            f"itself ({_fmt(at.get('period'))} d, {what}). A period there may come from when "
            "the star was observed (nightly or orbital systematics, aliasing), not from the "
            "star; check comparison stars observed with the same schedule."
        )
    agree = lookup(summary, "baselines.agreement")
    if agree is False:
        out.append(
            "The Lomb-Scargle and/or autocorrelation baselines disagree with the posterior "
            "period; referees will ask why."
        )
    return out


def _summary_rows(summary: Mapping[str, Any]) -> list[tuple[str, str, str, str]]:
    """(quantity, median, 68 % interval, 95 % interval) rows with units."""
    rows = []
    for key, label, unit in (
        ("period", "Rotation period", "d"),
        ("amplitude_ppt", "Amplitude", "ppt"),
        ("coherence_time_days", "Spot coherence time", "d"),
        ("coherence_time_rotations", "Spot coherence time", "rotations"),
    ):
        block = summary.get(key)
        if not isinstance(block, Mapping):
            continue
        rows.append((
            f"{label} [{unit}]",
            f"{_fmt(block.get('median'))} {unit}",
            _interval(block.get("interval_68"), unit),
            _interval(block.get("interval_95"), unit),
        ))
    return rows


def _table(headers: Iterable[str], rows: Iterable[Iterable[str]]) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


_PER_PARAMETER = (
    ("tau_steps", "autocorrelation time [steps]"),
    ("length_in_tau", "chain length [autocorrelation times]"),
    ("ess", "effective sample size"),
    ("rhat", "split R-hat across ensembles"),
)


def _diagnostics_table(diag: Mapping[str, Any]) -> str:
    """The convergence rule in words, then one table per sampled mode."""
    parts = []
    if diag.get("rule"):
        parts.append(f"<p>{html.escape(str(diag['rule']))}</p>")
    for mode in diag.get("modes") or []:
        if not isinstance(mode, Mapping):
            continue
        head = (f"Mode at {_fmt(mode.get('period'))} d: converged {_yesno(mode.get('converged'))}"
                f", {_fmt(mode.get('n_steps'))} steps, acceptance fraction "
                f"{_fmt(mode.get('acceptance_fraction'), 3)}, stuck walkers "
                f"{_fmt(mode.get('stuck_walkers'))}")
        if _finite(mode.get("period_precision")):
            head += (f", period precision {_fmt(mode.get('period_precision'), 2)} (largest Monte "
                     "Carlo error of its period numbers over their scale)")
        reasons = mode.get("reasons") or []
        if reasons:
            head += " — " + html.escape("; ".join(str(r) for r in reasons))
        parts.append(f"<p>{head}</p>")
        names = list((mode.get("tau_steps") or {}).keys())
        rows = [[html.escape(n)] + [_fmt((mode.get(key) or {}).get(n)) for key, _ in _PER_PARAMETER]
                for n in names]
        if rows:
            parts.append(_table(["parameter", *[label for _, label in _PER_PARAMETER]], rows))
    return "".join(parts) or "<p>No diagnostics recorded.</p>"


def _pre_json(obj: Any) -> str:
    return "<pre>" + html.escape(json.dumps(obj, indent=2, sort_keys=True, default=str)) + "</pre>"


def _read_summary(folder: Path) -> dict[str, Any]:
    path = folder / SUMMARY_NAME
    try:
        return json.loads(path.read_text())
    except FileNotFoundError:
        raise InputError(str(folder), f"no {SUMMARY_NAME} in this folder") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(str(path), f"not a valid summary file ({exc})") from None


def write_star_page(folder: str | os.PathLike[str]) -> Path:
    """Write ``index.html`` for one star's result folder.

    Parameters
    ----------
    folder : path
        A star's result folder holding ``summary.json`` and, where made, the figures
        ``summary.png``, ``scan.png``, ``corner.png`` and ``traces.png``.

    Returns
    -------
    Path
        The page written. Images are embedded as data URIs: the page is self-contained.

    Raises
    ------
    InputError
        If the folder has no readable ``summary.json``.
    """
    folder = Path(folder)
    s = _read_summary(folder)
    name = html.escape(str(s.get("identifier") or folder.name))
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
             f"<title>rotinfer: {name}</title><style>{_STYLE}</style></head><body>",
             f"<h1>{name}</h1>"]

    status = s.get("status")
    if status and status != "ok":
        parts.append(f"<p class='flag bad'>Status: {html.escape(str(status))} — "
                     f"{html.escape(str(s.get('error', '')))}</p>")
    parts.append("<h2>Result</h2>")
    parts.append(_table(
        ["detected", "converged", "harmonic warning", "sampling warning", "wall time"],
        [[_yesno(s.get("detected")), _yesno(s.get("converged")),
          _yesno(lookup(s, "harmonic.flag"), good_when=False),
          _yesno(lookup(s, "sampling.flag"), good_when=False),
          f"{_fmt(s.get('seconds'), 3)} s"]],
    ))
    parts.append(_table(["quantity", "median", "68 % interval", "95 % interval"],
                        _summary_rows(s)))
    extra = []
    for key, label in (("period.hdr_68", "Period 68 % highest-density region"),
                       ("period.hdr_95", "Period 95 % highest-density region")):
        region = lookup(s, key)
        if isinstance(region, list) and region:
            pieces = region if isinstance(region[0], list) else [region]
            extra.append([label, " ∪ ".join(_interval(iv, "d") for iv in pieces)])
    mcse = lookup(s, "period.mcse")
    if isinstance(mcse, Mapping) and _finite(mcse.get("median")):
        extra.append([
            "Period, Monte Carlo standard error (how far another seed would move each number)",
            f"median {_pm([mcse.get('median')])}; 68 % ends {_pm(mcse.get('interval_68'))}; "
            f"95 % ends {_pm(mcse.get('interval_95'))}"])
    if _finite(lookup(s, "period.map")):
        extra.append(["Period, maximum a posteriori", f"{_fmt(lookup(s, 'period.map'))} d"])
    if extra:
        parts.append(_table(["", "value"], extra))

    parts.append("<h2>Flags in words</h2><ul>")
    parts += [f"<li>{html.escape(t)}</li>" for t in _flag_sentences(s)] or ["<li>None.</li>"]
    parts.append("</ul>")

    parts.append("<h2>Baselines</h2>")
    parts.append(_table(
        ["method", "period", "strength", "uncertainty / false-alarm probability"],
        [["Lomb-Scargle", f"{_fmt(lookup(s, 'baselines.lomb_scargle.period'))} d",
          f"power {_fmt(lookup(s, 'baselines.lomb_scargle.power'))}",
          f"FAP {_fmt(lookup(s, 'baselines.lomb_scargle.false_alarm_probability'))}"],
         ["Autocorrelation", f"{_fmt(lookup(s, 'baselines.acf.period'))} d",
          f"local peak height {_fmt(lookup(s, 'baselines.acf.local_peak_height'))}",
          f"± {_fmt(lookup(s, 'baselines.acf.uncertainty'))} d"]],
    ))

    modes = s.get("modes")
    if isinstance(modes, list) and modes:
        parts.append("<h2>Posterior modes</h2>")
        cols = (("period", "period [d]"), ("relation", "relation"),
                ("sampled", "sampled"), ("probability", "posterior probability"),
                ("laplace_probability", "Laplace probability"),
                ("log_posterior", "ln posterior at optimum"), ("laplace_note", "note"))
        parts.append(_table([label for _, label in cols],
                            [[_fmt(m.get(c)) for c, _ in cols] for m in modes
                             if isinstance(m, Mapping)]))

    derived = s.get("derived")
    if isinstance(derived, Mapping) and derived:
        parts.append("<h2>Derived physics</h2>")
        lines = derived.get("lines")
        if isinstance(lines, list):
            parts.append("<ul>" + "".join(f"<li>{html.escape(str(x))}</li>" for x in lines)
                         + "</ul>")
        parts.append(_pre_json(derived))

    parts.append("<h2>Figures</h2>")
    shown = 0
    for fname, caption in FIGURES:
        path = folder / fname
        if path.is_file() and path.stat().st_size > 0:
            parts.append(f"<figure><img src='{_data_uri(path)}' alt='{html.escape(fname)}'>"
                         f"<figcaption>{html.escape(caption)}</figcaption></figure>")
            shown += 1
    if not shown:
        parts.append("<p>No figures in this folder.</p>")

    parts.append("<h2>Convergence diagnostics</h2>")
    parts.append(_diagnostics_table(s.get("diagnostics") or {}))

    parts.append("<h2>Configuration and provenance</h2>")
    prov = {k: s.get(k) for k in ("version", "seed", "input", "config_hash", "prepared",
                                  "samples_file") if k in s}
    parts.append(_pre_json(prov))
    if "config" in s:
        parts.append(_pre_json(s["config"]))
    parts.append("</body></html>")

    out = folder / STAR_PAGE
    _atomic_write_text(out, "\n".join(parts))
    return out


def find_star_folders(results: str | os.PathLike[str]) -> list[Path]:
    """Star folders (those with a ``summary.json``) directly inside ``results``, sorted by name."""
    results = Path(results)
    if not results.is_dir():
        raise InputError(str(results), "not a folder of results")
    return sorted(p for p in results.iterdir()
                  if p.is_dir() and not p.name.startswith(".") and (p / SUMMARY_NAME).is_file())


def _cell(value: Any, shown: str | None = None) -> str:
    sort = value if _finite(value) else ("" if value is None else str(value))
    if isinstance(value, bool):
        sort = int(value)
    text = shown if shown is not None else _fmt(value)
    return f"<td data-sort='{html.escape(str(sort), quote=True)}'>{text}</td>"


def write_vetting_page(results: str | os.PathLike[str], *, star_pages: bool = True) -> Path:
    """Write ``vetting.html`` listing every star of a results folder.

    Parameters
    ----------
    results : path
        Folder whose sub-folders are star result folders (each with ``summary.json``).
    star_pages : bool, optional
        Also (re)write each star's ``index.html`` (default True).

    Returns
    -------
    Path
        The vetting page. Its table is sortable by clicking a column header; thumbnails and
        star pages are linked by relative paths, so the folder can be moved as a whole.

    Raises
    ------
    InputError
        If ``results`` is not a folder or holds no star folders.
    """
    results = Path(results)
    folders = find_star_folders(results)
    if not folders:
        raise InputError(str(results), f"no star folders with a {SUMMARY_NAME} inside")
    headers = ["star", "thumbnail", "period [d]", "68 % interval [d]", "95 % interval [d]",
               "amplitude [ppt]", "detected", "harmonic warning", "sampling warning", "converged",
               "Monte Carlo error [d] (/ its scale)", "Lomb-Scargle [d]", "ACF [d]", "status"]
    rows = []
    for folder in folders:
        s = _read_summary(folder)
        if star_pages:
            write_star_page(folder)
        rel = folder.name
        name = html.escape(str(s.get("identifier") or folder.name))
        thumb = folder / THUMBNAIL
        thumb_html = (f"<img class='thumb' src='{html.escape(rel)}/{THUMBNAIL}' alt='thumbnail'>"
                      if thumb.is_file() else "—")
        iv68 = lookup(s, "period.interval_68")
        iv95 = lookup(s, "period.interval_95")
        rows.append("<tr>" + "".join([
            f"<td data-sort='{name}'><a href='{html.escape(rel)}/{STAR_PAGE}'>{name}</a></td>",
            f"<td data-sort=''>{thumb_html}</td>",
            _cell(lookup(s, "period.median")),
            _cell(iv68[0] if isinstance(iv68, list) and iv68 else None, _interval(iv68, "")),
            _cell(iv95[0] if isinstance(iv95, list) and iv95 else None, _interval(iv95, "")),
            _cell(lookup(s, "amplitude_ppt.median")),
            _cell(s.get("detected"), _yesno(s.get("detected"))),
            _cell(lookup(s, "harmonic.flag"), _yesno(lookup(s, "harmonic.flag"), False)),
            _cell(lookup(s, "sampling.flag"), _yesno(lookup(s, "sampling.flag"), False)),
            _cell(s.get("converged"), _yesno(s.get("converged"))),
            _cell(lookup(s, "period.mcse.relative"),
                  f"{_fmt(lookup(s, 'period.mcse.largest'), 2)} "
                  f"({_fmt(lookup(s, 'period.mcse.relative'), 2)})"),
            _cell(lookup(s, "baselines.lomb_scargle.period")),
            _cell(lookup(s, "baselines.acf.period")),
            _cell(s.get("status", "ok")),
        ]) + "</tr>")
    head = "".join(f"<th class='sortable'>{html.escape(h)}</th>" for h in headers)
    page = (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>rotinfer: vetting {html.escape(results.name)}</title><style>{_STYLE}</style>"
        f"</head><body><h1>Vetting: {html.escape(results.name)} ({len(rows)} stars)</h1>"
        "<p>Click a column header to sort. Check the harmonic, sampling and convergence "
        "columns first; "
        "open a star to see its light curve, periodograms and posterior.</p>"
        f"<table class='sortable' id='stars'><thead><tr>{head}</tr></thead><tbody>"
        + "\n".join(rows) + f"</tbody></table><script>{_SORT_SCRIPT}</script></body></html>"
    )
    out = results / VETTING_PAGE
    _atomic_write_text(out, page)
    return out


def _atomic_write_text(path: Path, text: str) -> None:
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)
