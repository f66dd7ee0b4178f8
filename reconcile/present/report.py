"""The bench story in one self-contained HTML page.

:func:`build_report` collects the analyses (:func:`reconcile.pipeline.report.collect_report`)
and draws their figures (:func:`draw_figures`); :func:`render_html` turns the result into
one HTML file with every plot embedded as a PNG data URI, so the page opens anywhere
with no network. Code here renders; it never prints.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

from reconcile import __version__
from reconcile.data.readings import standard_uncertainty
from reconcile.errors import ReconcileError
from reconcile.present import numbers
from reconcile.pipeline.report import SECTIONS, ReportData, board_as_read, collect_report

__all__ = ["CAUTIONS", "SECTIONS", "ReportData", "build_report", "draw_figures",
           "prepare_report_path",
           "render_html", "write_report"]

CAUTIONS = (
    "Bench work can hurt people. Follow your local lab rules and qualified practice: "
    "switch off and let supplies and large capacitors discharge before any rework or "
    "in-circuit measurement; keep mains-powered instruments properly earthed and never "
    "defeat a protective earth; use ESD protection for transistors; set the supply's "
    "current limit before powering a board that may be faulty; check the power and "
    "voltage ratings of every part you add. This report is arithmetic on readings, not "
    "a safety assessment."
)


def _png_file(path: Path) -> bytes:
    data = path.read_bytes()
    path.unlink(missing_ok=True)
    return data


def draw_figures(data: ReportData, work_dir: Path) -> None:
    """Draw every figure of the page into ``data.plots`` (PNG bytes)."""
    from reconcile.present.plots_fit import panel_png
    from reconcile.present.plots_report import hypotheses_png, error_budget_png, operating_point_png
    from reconcile.present.plots_sweep import fitted_response_png
    from reconcile.present.plots_trim import plot_trim

    work_dir.mkdir(parents=True, exist_ok=True)
    data.plots["board"] = operating_point_png(
        data.design.nodes, data.fit["predicted"]["nodes"], data.readings
    )
    data.plots["readings"] = panel_png(data.outcome.fit, "readings")
    data.plots["fit"] = panel_png(data.outcome.fit, "parameters")
    bode = fitted_response_png(data.outcome.fit)
    if bode is not None:
        data.plots["bode"] = bode
    if data.budget:
        data.plots["budget"] = error_budget_png(data.budget)
    data.plots["diagnosis"] = hypotheses_png(data.diagnosis["hypotheses"])
    if data.trim_result is not None:
        try:
            data.plots["trim"] = _png_file(plot_trim(data.trim_result, work_dir / "trim.png"))
        except ReconcileError:  # no option or no draws: the table says why
            pass


def build_report(inputs, readings=None, *, work_dir: Path, **analyses) -> ReportData:
    """:func:`~reconcile.pipeline.report.collect_report` on ``inputs`` (an
    :class:`~reconcile.pipeline.inputs.AnalysisInputs`, or a board and its readings;
    keyword arguments passed on), then :func:`draw_figures`."""
    data = collect_report(inputs, readings, **analyses)
    if analyses.get("on_stage") is not None:
        analyses["on_stage"]("drawing the figures")
    draw_figures(data, work_dir)
    return data


# ----------------------------------------------------------------------- HTML
STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:2rem auto;max-width:1100px;
color:#1d2327;line-height:1.4;padding:0 1rem}
h1{font-size:1.6rem;margin-bottom:.2rem} h2{border-bottom:2px solid #1b6a8a;padding-bottom:.2rem;
margin-top:2.2rem;color:#1b6a8a}
table{border-collapse:collapse;margin:.6rem 0;font-size:.88rem} th,td{border:1px solid #d0d7de;
padding:.25rem .5rem;text-align:right} th{background:#eef3f6}
td:first-child,th:first-child{text-align:left}
.caution{background:#fff4d6;border-left:5px solid #d7a233;padding:.7rem 1rem;margin:1rem 0}
.bad{color:#b23a48;font-weight:600} .ok{color:#2a7f62;font-weight:600} .dim{color:#777}
img.plot{max-width:100%;border:1px solid #e1e4e8;margin:.6rem 0;display:block}
pre{background:#f6f8fa;padding:.6rem;overflow:auto;font-size:.8rem}
.verdict{font-size:1.05rem;margin:.5rem 0}
"""

CHECK_SCRIPT = """
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.querySelectorAll('img.plot'));
  var good = imgs.filter(function (i) {
    return i.complete && i.naturalWidth >= 200 && i.naturalHeight >= 100;
  });
  var sections = document.querySelectorAll('section.part').length;
  document.body.setAttribute('data-plots', String(imgs.length));
  document.body.setAttribute('data-plots-ok', String(good.length));
  document.body.setAttribute('data-sections', String(sections));
  document.body.setAttribute('data-rendered', good.length === imgs.length ? 'ok' : 'broken');
});
"""


def _e(x) -> str:
    return html.escape(str(x))


def _predicted_unit(quantity: str) -> str:
    """The unit of a trim option's predicted quantity (a corner in Hz)."""
    if quantity.endswith("corner"):
        return "Hz"
    return "Ω" if quantity.endswith("resistance") else ""


def _change_value(change: dict) -> str:
    """A trim change's new value from its JSON (``ohms`` or, for a capacitor, ``farads``)."""
    if "farads" in change:
        return numbers.si(change["farads"], "F", 3)
    return numbers.si(change["ohms"], "Ω", 3)


def _num(x, unit: str = "", digits: int = 4) -> str:
    if x is None:
        return "–"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int | float):
        return _e(numbers.si(float(x), unit, digits))
    return _e(x)


def _table(headers: list[str], rows: list[list[str]]) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _img(data: bytes | None, alt: str) -> str:
    if not data:
        return f'<p class="dim">(no figure: {_e(alt)})</p>'
    b64 = base64.b64encode(data).decode("ascii")
    return f'<img class="plot" alt="{_e(alt)}" src="data:image/png;base64,{b64}">'


def _section(key: str, title: str, body: str) -> str:
    return f'<section class="part" id="{key}"><h2>{_e(title)}</h2>{body}</section>'




def _board_section(d: ReportData) -> str:
    b = d.board
    rows = []
    for r in b.resistors.values():
        rows.append(
            [
                _e(r.ref),
                "resistor",
                f"{_e(r.nodes[0])} – {_e(r.nodes[1])}",
                _num(r.ohms, "Ω"),
                f"±{100 * r.tolerance:g}%",
                _num(r.rating_w, "W") if r.rating_w else "–",
            ]
        )
    for c in b.capacitors.values():
        rows.append(
            [
                _e(c.ref),
                "capacitor",
                f"{_e(c.nodes[0])} – {_e(c.nodes[1])}",
                _num(c.farads, "F"),
                f"±{100 * c.tolerance:g}%",
                "–",
            ]
        )
    for s in b.supplies.values():
        rows.append(
            [
                _e(s.ref),
                "supply",
                f"{_e(s.node)} – gnd",
                _num(s.volts, "V"),
                f"±{100 * s.tolerance:g}%",
                "–",
            ]
        )
    for q in b.transistors.values():
        rows.append(
            [
                _e(q.ref),
                f"{q.polarity} transistor",
                f"c {_e(q.c)}, b {_e(q.b)}, e {_e(q.e)}",
                _e(q.device),
                "–",
                "–",
            ]
        )
    spec = "".join(
        f"<li>{_e(k)}: {_num(t.value)} ±{100 * t.tolerance:g}%</li>"
        for k, t in b.spec.targets.items()
    )
    if b.spec.min_vce is not None:
        spec += f"<li>min |VCE|: {_num(b.spec.min_vce, 'V')}</li>"
    text = _e(board_as_read(b))
    return (
        _table(["ref", "kind", "nodes", "value", "tolerance", "rating"], rows)
        + (f"<p>Spec:</p><ul>{spec}</ul>" if spec else "")
        + _img(d.plots.get("board"), "operating point")
        + "<details><summary>board as read (parsed values in SI units; the board "
        f"file's comments are not copied)</summary><pre>{text}</pre></details>"
    )


def _readings_section(d: ReportData) -> str:
    rows = []
    fits = {(r["quantity"], r["at"], r.get("frequency")): r
            for r in (d.fit or {}).get("readings", [])}
    for r in d.readings:
        unit = numbers.quantity_symbol(r.quantity)
        value = f"{r.value - 273.15:.2f} °C" if r.quantity == "temperature" else _num(r.value, unit)
        u = standard_uncertainty(r, d.board)
        f = fits.get((r.quantity, r.at, r.frequency))
        z = "–" if f is None else f"{f['normalized_residual']:+.2f}"
        if f is not None and f.get("suspect"):
            z = f'<span class="bad">{z} suspect</span>'
        rows.append(
            [
                _e(r.quantity),
                _e(r.at or "–"),
                value,
                _num(u, "K" if r.quantity == "temperature" else unit),
                "given" if r.uncertainty is not None else "default",
                _e(r.instrument or "–"),
                _e(r.note or ""),
                z,
            ]
        )
    return _table(
        ["quantity", "at", "value", "u (1σ)", "u from", "instrument", "note", "z"], rows
    ) + _img(d.plots.get("readings"), "readings against the fitted board")


def _assumed_note(d: ReportData, what: str) -> str:
    """One line saying which hypothesis ``what`` follows ("" for the board as drawn)."""
    a = d.assumed
    if not a:
        return ""
    where = "assumed (--assume)" if a["source"] == "assumed" else (
        f"the diagnosis' decisive leader, probability {a['probability']:.2f}")
    return (f'<p class="assumed">Under the hypothesis <b>{_e(a["hypothesis"])}</b> ({_e(where)}): '
            f"{_e(what)}</p>")


def _fit_section(d: ReportData) -> str:
    f = d.fit or {}
    rows = []
    for key, p in f.get("parameters", {}).items():
        unit = numbers.symbol(p["unit"])
        inside = p.get("in_tolerance")
        status = (
            "–"
            if inside is None
            else ('<span class="ok">in</span>' if inside else '<span class="bad">OUT</span>')
        )
        if key == "temperature":
            val = _e(numbers.temperature(p["value"], p["stderr"]))
            nom = _e(numbers.temperature(p["nominal"]))
        else:
            val = _e(numbers.with_u(p["value"], p["stderr"], unit))
            nom = _num(p["nominal"], unit)
        rows.append([_e(key), nom, val, status, _e(p["informed_by"])])
    verdict = f.get("verdict", "")
    cls = "ok" if verdict == "consistent" else "bad"
    head = (
        f'<p class="verdict">readings\' χ² = {f.get("chi_square", 0):.2f} for '
        f'{_e(numbers.plain(f.get("dof", 0), 3))} degrees of freedom, '
        f'p = {f.get("p_value", 0):.3g}: <span class="{cls}">{_e(verdict)}</span>; '
        f'prior penalty {_e(numbers.plain(f.get("prior_penalty", 0), 3))} (not in the '
        f'verdict)</p>'
    )
    nxt = ""
    if d.next_readings:
        nrows = [
            [_e(s["quantity"]), _e(s["at"] or "–"),
             _e("–" if s.get("frequency") is None else numbers.si(s["frequency"], "Hz", 4)),
             f"{100 * s['expected_reduction']:.1f}%"]
            for s in d.next_readings
        ]
        nxt = "<p>Next most useful readings:</p>" + _table(
            ["quantity", "at", "frequency", "expected reduction"], nrows
        )
    return (
        _assumed_note(d, "the board is fitted as built under it.")
        + head
        + _table(["parameter", "nominal", "fitted ± 1σ", "in tolerance", "informed by"], rows)
        + _img(d.plots.get("fit"), "fit")
        + (_img(d.plots["bode"], "frequency response of the fitted board")
           if d.plots.get("bode") else "")
        + nxt
    )


def _budget_section(d: ReportData) -> str:
    if not d.budget:
        return "<p>The board has no [spec] with a signal set-up: no error budget.</p>"
    rows = []
    for name, q in d.budget.items():
        unit = "Ω" if name.endswith("resistance") else ""
        target = q["target"]
        rows.append(
            [
                _e(name),
                _num(target, unit),
                _num(q["fitted"], unit),
                _e(numbers.signed(q["total"], unit, scale=target)),
                _e(numbers.signed(q["design"], unit, scale=target)),
                *(
                    _e(numbers.with_u(q[g], q["stderr"][g], unit, sign=True, scale=target))
                    for g in ("parts", "devices", "bench")
                ),
            ]
        )
    return (
        _assumed_note(d, "the error budget is of the board as built under it.")
        + "<p>Shapley shares over the orders of substitution (design = the drawn board under "
        "the exact model against the target); each share with its standard uncertainty "
        "(GUM 7.2.6 rounding).</p>"
        + _table(
            ["quantity", "target", "fitted", "error", "design", "parts", "devices", "bench"], rows
        )
        + _img(d.plots.get("budget"), "error budget")
    )


def _diagnosis_section(d: ReportData) -> str:
    diag = d.diagnosis or {}
    rows = []
    for h in diag.get("hypotheses", [])[:10]:
        rows.append(
            [
                _e(h["ref"] or "–"),
                _e(h["fault"]),
                _num(h.get("value")),
                f"{100 * (h['probability'] or 0):.1f}%",
                f"{h['chi_square']:.2f}",
                _e(h.get("check") or ""),
            ]
        )
    summary = f"<p>{_e(diag.get('summary', ''))}</p>"
    return (
        summary
        + _table(["part", "fault", "value", "probability", "χ²", "check with a meter"], rows)
        + _img(d.plots.get("diagnosis"), "fault probabilities")
    )


def _trim_section(d: ReportData) -> str:
    t = d.trim
    if t is None:
        return "<p>The board has no [spec]: nothing to trim towards.</p>"
    rows = []
    repair = t.get("repair")
    if repair:
        b = t["baseline"]
        y = b.get("yield")
        rows.append([
            "<b>" + _e("first, restore the drawn design: " + (
                "; ".join(step["text"] for step in repair["steps"]) or "nothing to repair"))
            + "</b>",
            _e(", ".join(f"{k} {numbers.si(v, _predicted_unit(k))}"
                         for k, v in b["predicted"].items())),
            f"{100 * (b.get('margin') or 0):+.1f}%",
            '<span class="ok">yes</span>' if b["meets_spec"] else '<span class="bad">no</span>',
            "–" if y is None else f"{100 * y:.1f}%",
        ])
    for o in t.get("options", [])[:10]:
        change = (
            "; ".join(
                f"{c['ref']} {'replace with' if c['action'] == 'replace' else 'add in parallel'} "
                f"{_change_value(c)} ({c['series']})"
                for c in o["changes"]
            )
            or "no change"
        )
        pred = ", ".join(
            f"{k} {numbers.si(v, _predicted_unit(k))}"
            for k, v in o["predicted"].items()
        )
        y = o.get("yield")
        rows.append(
            [
                _e(change),
                _e(pred),
                f"{100 * (o.get('margin') or 0):+.1f}%",
                '<span class="ok">yes</span>' if o["meets_spec"] else '<span class="bad">no</span>',
                "–" if y is None else f"{100 * y:.1f}%",
            ]
        )
    warning = t.get("warning")
    caution = "" if not warning else f'<p class="caution">Warning: {_e(warning)}</p>'
    note = _assumed_note(d, "the first row repairs it; the options after it rework the "
                         "repaired board.") if repair else ""
    return (
        note
        + caution
        + f"<p>Search: {_e(t.get('search'))}, {t.get('evaluated')} boards evaluated. Power off "
        "before any rework; check the new part's rating.</p>"
        + _table(["change", "predicted", "margin", "meets spec", "yield"], rows)
        + _img(d.plots.get("trim"), "before and after the best option")
    )


def _lot_section(d: ReportData) -> str:
    lot = d.lot
    s = lot["summary"]
    beta, is_ = s["beta"], s["IS"]
    rows = [
        [
            "beta",
            _num(beta["mean"]),
            _num(beta["sd"]),
            _num(beta["p05"]),
            _num(beta["p50"]),
            _num(beta["p95"]),
        ],
        ["IS (geometric)", _num(is_["geo_mean"], "A"), f"{is_['log10_sd']:.3g} dec", "", "", ""],
    ]
    out = ", ".join(lot.get("outliers", [])) or "none"
    return (
        _table(["quantity", "mean", "sd", "p05", "p50", "p95"], rows)
        + f"<p>Outliers: {_e(out)}; {len(lot.get('devices', {}))} devices.</p>"
        + _img(d.plots.get("lot"), "lot")
    )


def _provenance_section(d: ReportData) -> str:
    rows = [["tool", f"reconcile {_e(__version__)}"], ["created", _e(d.created)]]
    rows += [[_e(k), f"<code>{_e(v)}</code>"] for k, v in d.hashes.items()]
    if d.session:
        rows += [[_e(k), _e(v)] for k, v in d.session.items() if not isinstance(v, list | dict)]
    return _table(["item", "value"], rows)


def render_html(d: ReportData) -> str:
    """The whole page as one HTML string (no external resources)."""
    parts = [
        ("board", "The board", _board_section(d)),
        ("readings", "The readings", _readings_section(d)),
        ("fit", "What was built (the fit)", _fit_section(d)),
        ("budget", "Error budget: where the difference from the spec comes from", _budget_section(d)),
        ("diagnosis", "What is wrong with it", _diagnosis_section(d)),
        ("trim", "The least rework", _trim_section(d)),
    ]
    if d.lot is not None:
        parts.append(("lot", "The transistor lot", _lot_section(d)))
    parts.append(("provenance", "Provenance", _provenance_section(d)))
    body = "".join(_section(k, t, b) for k, t, b in parts)
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>reconcile report: {_e(d.title)}</title><style>{STYLE}</style>"
        f"<script>{CHECK_SCRIPT}</script></head><body>"
        f"<h1>{_e(d.title)}</h1><p class='dim'>reconcile {_e(__version__)} · {_e(d.created)}</p>"
        f"<div class='caution'><strong>Bench safety.</strong> {_e(CAUTIONS)}</div>"
        f"{body}</body></html>"
    )


def prepare_report_path(path: Path) -> Path:
    """Make the report's folder before the analysis runs (it takes seconds), so a path
    that cannot be written fails at once, with the same one-line error as the write.

    Raises
    ------
    OSError
        The folder cannot be made (a file stands in its way), the path is a folder, or
        the folder is not writable.
    """
    import errno
    import os

    path.parent.mkdir(parents=True, exist_ok=True)
    if path.is_dir():
        raise IsADirectoryError(errno.EISDIR, "is a folder, not a file", str(path))
    if not os.access(path.parent, os.W_OK):
        raise PermissionError(errno.EACCES, "cannot write in this folder", str(path.parent))
    return path


def write_report(d: ReportData, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render_html(d), encoding="utf-8")
    return path
