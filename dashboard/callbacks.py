"""Callbacks: each view's logic as a plain method of :class:`Views` (unit-testable), wired by ``register``.

Views read stored results through a source (cloakrcs.dashboard.data) and build figures with
cloakrcs.figures and cloakrcs.dashboard.plots; re-gating calls cloakrcs.process.process_campaign on the
campaign rebuilt from the store, in a background job.
"""

from __future__ import annotations

import functools
import re
import shutil
import threading
from collections import OrderedDict
from dataclasses import replace
from pathlib import Path

import numpy as np
from dash import Input, Output, State, html, no_update
from dash.exceptions import PreventUpdate

from .. import figures as F
from .. import uncertainty
from ..errors import InputError
from ..process import ProcessSettings, check_failure_text, process_campaign

from . import plots
from .jobs import Cancelled, JobManager
from .layout import TREND_METRICS
from .upload import decode_upload, unpack_campaign, upload_error, upload_folder


def _opt(values, fmt=str):
    return [{"label": fmt(v), "value": v} for v in values]


def _pols(t) -> list[str]:
    return [str(p) for p in t.amplitude.polarization.values]


def _ghz(x) -> str:
    return f"{x / 1e9:.3f}"


UI_NAME_CHARS = 80  # names drawn longer are cut (the full text stays in the cell's tooltip)
UI_TEXT_CHARS = 400  # a warning or problem line


def short(text, limit: int = UI_NAME_CHARS) -> str:
    """Text cut to ``limit`` characters with an ellipsis, so a long name cannot swamp the page."""
    text = str(text)
    return text if len(text) <= limit else text[:limit - 1] + "…"


def _cell(c) -> html.Td:
    if isinstance(c, str) and len(c) > UI_NAME_CHARS:
        return html.Td(short(c), title=short(c, UI_TEXT_CHARS))
    return html.Td(c)


def _table(rows: list[list], header: list[str], cls: str = "tbl") -> html.Table:
    return html.Table(className=cls, children=[html.Thead(html.Tr([html.Th(h) for h in header])),
                                               html.Tbody([html.Tr([_cell(c) for c in r]) for r in rows])])


def _fmt(x, spec=".2f", unit="") -> str:
    if x is None or (isinstance(x, float) and not np.isfinite(x)):
        return "—"
    return f"{x:{spec}}{unit}"


def format_parameters(params: dict) -> str:
    return "; ".join(f"{k} = {v}" for k, v in params.items())


def parse_parameters(text: str) -> dict:
    """'a = 1; b = x' -> {'a': '1', 'b': 'x'}; InputError for an item without '='."""
    out = {}
    for item in (text or "").split(";"):
        if not item.strip():
            continue
        if "=" not in item:
            raise InputError(f"parameter {item.strip()!r} needs the form key = value")
        k, v = item.split("=", 1)
        if not k.strip():
            raise InputError(f"parameter {item.strip()!r} has no key")
        out[k.strip()] = v.strip()
    return out


def _hashable(x):
    if isinstance(x, (list, tuple)):
        return tuple(_hashable(v) for v in x)
    if isinstance(x, dict):
        return tuple(sorted((k, _hashable(v)) for k, v in x.items()))
    return x


def memo(method):
    """Cache a view's output per arguments: a run's stored result never changes (LRU of 256)."""
    name = method.__name__

    @functools.wraps(method)
    def wrapper(self, *args):
        key = (name, _hashable(args))
        cache = self._cache
        with self._cache_lock:  # the server answers requests on several threads
            if key in cache:
                cache.move_to_end(key)
                return cache[key]
        out = method(self, *args)
        with self._cache_lock:
            cache[key] = out
            while len(cache) > 256:
                cache.popitem(last=False)
        return out

    return wrapper


def check_alarm(lines: list[str]):
    """A prominent box (failed check targets, differently gated reductions); None when there is nothing."""
    if not lines:
        return None
    return html.Div(className="alarm", role="alert", children=html.Ul([html.Li(x) for x in lines]))


def upload_relative(text: str, upload_root) -> str:
    """Strip '<upload root>/<upload folder>/' from paths in a message: the name inside the upload remains."""
    if not upload_root:
        return text
    root = re.escape(str(upload_root).rstrip("/\\"))
    return re.sub(root + r"[/\\][0-9a-f]{16}[/\\]", "", text)


class Views:
    """The dashboard's logic over one source of results."""

    def __init__(self, source, jobs: JobManager | None = None):
        self.source = source
        self.jobs = jobs or JobManager()
        self._cache: OrderedDict = OrderedDict()
        self._cache_lock = threading.Lock()

    def clear_cache(self) -> None:
        with self._cache_lock:
            self._cache.clear()

    # ------------------------------------------------------------------ runs
    def run_options(self) -> list[dict]:
        return [{"label": f"run {r['run_id']}: {short(r['campaign'])} ({short(r['prototype'])}), {r['processed_at']}",
                 "value": r["run_id"]} for r in self.source.runs()]

    def result(self, run_id):
        if run_id is None:
            raise PreventUpdate
        return self.source.result(int(run_id))

    # ------------------------------------------------------------------ campaign
    def campaign_controls(self, run_id):
        r = self.result(run_id)
        pols = sorted({p for t in r.targets.values() for p in _pols(t)})
        return _opt(pols), pols[0] if pols else None

    @memo
    def campaign_summary(self, run_id):
        r = self.result(run_id)
        s = r.settings
        f = r.frequency_hz
        df = float(f[1] - f[0]) if f.size > 1 else 0.0
        facts = [
            ["campaign", r.campaign], ["prototype", r.prototype], ["date", r.date or "—"],
            ["frequency grid", f"{_ghz(f[0])}–{_ghz(f[-1])} GHz, {f.size} points, step {df / 1e6:.4g} MHz"],
            ["valid band (after gating)", f"{_ghz(s['valid_band_hz'][0])}–{_ghz(s['valid_band_hz'][1])} GHz"],
            ["reporting band", f"{_ghz(s['reporting_band_hz'][0])}–{_ghz(s['reporting_band_hz'][1])} GHz"],
            ["window", f"{s.get('window')}" + (f" (beta {s.get('kaiser_beta')})" if s.get("window") == "kaiser" else "")],
            ["floor (median, dBsm)", ", ".join(f"{p} {v:.1f}" for p, v in r.floor.items()) or "—"],
            ["raw files", str(len(s.get("files", {})))],
        ]
        trows = []
        for name, t in r.targets.items():
            ang = np.asarray(t.amplitude.angle.values, dtype=float)
            cover = f"{ang.size} ({ang.min():g}° to {ang.max():g}°)" if ang.size > 1 else f"1 ({ang[0]:g}°)"
            role = t.role + (" (check)" if t.shape and t.role == "subject" else "")
            trows.append([name, role, t.revision if t.role == "subject" else "", t.baseline or "",
                          " ".join(_pols(t)), cover, f"{t.gate['center_m']:.3f} ± {t.gate['span_m'] / 2:.3f} m"])
        checks = [[c["target"], c["polarization"], f"{c['max_error_db']:.2f}", f"{c['rms_error_db']:.2f}",
                   f"±{c['tolerance_db']:g}", "pass" if c["passed"] else "FAIL"] for c in r.checks]
        failed = [check_failure_text(c) for c in r.checks if not c["passed"]]
        problems = [f"{m['subject']} {m['polarization']}: {m['floor_limited_points']} of {m['points']} points "
                     f"floor-limited, band reduction is a {m['bound']} bound" for m in r.metrics
                     if m["bound"] != "none"]
        if not r.checks:
            problems.append("no check target: the calibration rests on one reference alone")
        notes = [self.shown(w) for w in r.warnings if w not in failed] + problems
        summary = html.Div([
            html.Div([html.H3("Campaign"), _table(facts, ["", ""], "tbl facts")], className="col"),
            html.Div([html.H3("Targets"), _table(trows, ["target", "role", "revision", "baseline", "pol.",
                                                          "angles", "gate"]),
                      html.H3("Check target against theory"),
                      _table(checks, ["target", "pol.", "max err. (dB)", "RMS (dB)", "tolerance", "result"])
                      if checks else html.P("No check target in this campaign.")], className="col wide"),
        ], className="row")
        warn = html.Div(className="warnings" if notes else "ok", children=[
            html.H3("Warnings and problems found" if notes else "No warnings"),
            html.Ul([html.Li(short(n, UI_TEXT_CHARS)) for n in notes]) if notes else None])
        return summary, html.Div([check_alarm(failed), warn])

    def shown(self, text: str) -> str:
        """A message as the user knows its files: paths inside an upload folder become paths inside the upload."""
        return upload_relative(text, self.source.upload_root)

    @memo
    def campaign_check(self, run_id, pol):
        r = self.result(run_id)
        checks = [c for c in r.checks if c["polarization"] == pol]
        return F.fig_check(r, checks[0]) if checks else plots.message_figure(f"No check target in {pol}.")

    @memo
    def campaign_floor(self, run_id, pol):
        return plots.fig_floor(self.result(run_id), pol)

    @memo
    def campaign_coverage(self, run_id):
        return plots.fig_coverage(self.result(run_id))

    def campaign_figures(self, run_id, pol):
        return self.campaign_check(run_id, pol), self.campaign_floor(run_id, pol), self.campaign_coverage(run_id)

    # ------------------------------------------------------------------ range and gate
    def gate_targets(self, run_id):
        r = self.result(run_id)
        names = [n for n, t in r.targets.items()]
        default = next((n for n, t in r.targets.items() if t.role == "subject" and t.amplitude.sizes["angle"] > 1),
                       names[0])
        return _opt(names), default, r.settings.get("window", "kaiser")

    def gate_target_controls(self, run_id, target):
        r = self.result(run_id)
        t = r.targets.get(target)
        if t is None:
            raise PreventUpdate
        ang = [float(a) for a in t.amplitude.angle.values]
        pols = _pols(t)
        a0 = ang[int(np.argmin(np.abs(F._wrap(ang))))]
        return (_opt(pols), pols[0], _opt(ang, lambda a: f"{a:g}"), a0,
                round(t.gate["center_m"], 4), round(t.gate["span_m"], 4))

    @memo
    def range_profile(self, run_id, target, pol, angle, center, span, window):
        r = self.result(run_id)
        if target not in r.targets or pol is None or angle is None:
            raise PreventUpdate
        if center is None or span is None or span <= 0:
            return plots.message_figure("Give a gate centre and a positive span (m).")
        campaign = self.source.campaign(int(run_id))
        s = r.settings
        try:
            fig = F.fig_range_profile(campaign, target, pol, float(angle), gate={"center_m": float(center),
                                                                                   "span_m": float(span)},
                                      window=window or s.get("window", "kaiser"),
                                      kaiser_beta=s.get("kaiser_beta", 6.0), pad_factor=s.get("pad_factor", 4),
                                      edge_fraction=s.get("edge_fraction", 0.2))
        except InputError as exc:
            return plots.message_figure(str(exc))
        stored = r.targets[target].gate
        fig.add_shape(type="line", yref="paper", y0=0, y1=1, x0=stored["center_m"], x1=stored["center_m"],
                      line={"color": "#9aa5b1", "dash": "dot", "width": 1})
        fig.add_annotation(yref="paper", y=1, x=stored["center_m"], text="stored centre", showarrow=False,
                           yanchor="bottom", font={"size": 10, "color": "#5f6b7a"})
        far = max(float(center) + float(span), stored["center_m"] + stored["span_m"]) * 1.6
        fig.update_xaxes(range=[0, far])
        fig.update_layout(uirevision=f"{target}{pol}{angle}")
        return fig

    def settings_for(self, run_id, target, center, span, window, scope) -> ProcessSettings:
        r = self.result(run_id)
        base = ProcessSettings.from_dict(r.settings.get("process_settings", {}))
        gate = {"center_m": float(center), "span_m": float(span)}
        if scope == "*":
            overrides = {"*": gate}
        else:
            overrides = {**base.gate_overrides, target: gate}
        return replace(base, gate_overrides=overrides, window=window or base.window)

    def start_regate(self, run_id, target, center, span, window, scope) -> str:
        if center is None or span is None or float(span) <= 0:
            raise InputError("give a gate centre and a positive span (m)")
        settings = self.settings_for(run_id, target, center, span, window, scope)
        campaign = self.source.campaign(int(run_id))
        total = sum(1 for c in campaign.cubes.values() if c.spec.role != "background") + 3
        return self.jobs.start("regate", total, lambda tick: process_campaign(campaign, settings, progress=tick),
                               run_id=int(run_id))

    def job_status(self, job_id):
        """(fraction 0..1, state, one-line text) of a job."""
        job = self.jobs.get(job_id)
        if job is None:
            return 0.0, "none", ""
        text = {"running": f"working: {job.step} ({job.done}/{job.total})", "done": "done",
                "cancelled": "cancelled", "failed": f"failed: {job.error}"}[job.state]
        return job.fraction, job.state, text

    def preview(self, job_id, target, pol, angle):
        job = self.jobs.get(job_id)
        if job is None or job.state != "done":
            raise PreventUpdate
        now = self.result(job.info["run_id"])
        new = job.value
        fig = plots.fig_preview(now, new, target, pol, float(angle or 0.0))
        rows = []
        old = {(m["subject"], m["polarization"]): m for m in now.metrics}
        for m in new.metrics:
            o = old.get((m["subject"], m["polarization"]), {})
            rows.append([m["subject"], m["polarization"], _fmt(o.get("band_reduction_db")),
                         f"{m['band_reduction_db']:.2f} ± {m['band_reduction_uncertainty_db']:.2f}",
                         _fmt(o.get("bandwidth_hz", 0) / 1e6 if o else None, ".0f"), f"{m['bandwidth_hz'] / 1e6:.0f}"])
        for c in new.checks:
            o = next((x for x in now.checks if x["target"] == c["target"] and x["polarization"] == c["polarization"]), {})
            rows.append([f"check {c['target']}", c["polarization"], _fmt(o.get("max_error_db")),
                         f"{c['max_error_db']:.2f} (max error)", "", ""])
        table = _table(rows, ["subject", "pol.", "band red. now (dB)", "new (dB)", "bandwidth now (MHz)", "new (MHz)"])
        return fig, table

    def keep(self, job_id) -> int:
        job = self.jobs.get(job_id)
        if job is None or job.state != "done":
            raise InputError("no finished reprocessing to keep")
        campaign = self.source.campaign(job.info["run_id"])
        return self.source.record(campaign, job.value)

    # ------------------------------------------------------------------ RCS
    def rcs_controls(self, run_id):
        r = self.result(run_id)
        subjects = [n for n, t in r.targets.items() if t.role == "subject"]
        names = list(r.targets)
        cloaked = [n for n in subjects if r.targets[n].baseline]
        base = r.targets[cloaked[0]].baseline if cloaked else (subjects[0] if subjects else names[0])
        chosen = [base] + cloaked[:2] if cloaked else [base]
        t = r.targets[base]
        pols = _pols(t)
        angles = [float(a) for a in t.amplitude.angle.values]
        default_angles = F.main_angles(r, cloaked[0], pols[0], limit=2) if cloaked else angles[:1]
        fb = r.frequency_hz[r.valid_mask]
        step = max(1, fb.size // 60)
        freqs = [float(x) for x in fb[::step]]
        band = r.frequency_hz[r.band_mask]
        mid = float(band[band.size // 2]) if band.size else freqs[len(freqs) // 2]
        pick = [freqs[int(np.argmin(np.abs(np.asarray(freqs) - x)))] for x in (band[0], mid)] if band.size else [mid]
        return (_opt(names), chosen, _opt(pols), pols[0], _opt(angles, lambda a: f"{a:g}"), default_angles,
                _opt(freqs, _ghz), list(dict.fromkeys(pick)), _opt(names), chosen[-1])

    @memo
    def rcs_frequency(self, run_id, targets, pol, angles):
        r = self.result(run_id)
        targets = [t for t in (targets or []) if t in r.targets]
        if not targets or not angles or pol is None:
            return plots.message_figure("Choose at least one target and one angle.")
        return F.fig_rcs_vs_frequency(r, targets, pol, [float(a) for a in angles])

    @memo
    def rcs_polar(self, run_id, targets, pol, freqs):
        r = self.result(run_id)
        targets = [t for t in (targets or []) if t in r.targets and r.targets[t].amplitude.sizes["angle"] > 1]
        if not targets or not freqs or pol is None:
            return plots.message_figure("Choose a target measured at several angles and a frequency.")
        return F.fig_polar(r, targets, pol, [float(f) for f in freqs])

    @memo
    def rcs_map(self, run_id, target, pol):
        r = self.result(run_id)
        t = r.targets.get(target)
        if t is None or pol not in _pols(t):
            return plots.message_figure(f"No {pol} sweeps of {target}.")
        if t.amplitude.sizes["angle"] < 2:
            return plots.message_figure(f"{target} was measured at one angle only: no map.")
        return plots.fig_rcs_map(r, target, pol)

    # ------------------------------------------------------------------ reduction
    def reduction_controls(self, run_id):
        r = self.result(run_id)
        subjects = list(dict.fromkeys(s for s, _p in r.reductions))
        if not subjects:
            return [], None, [], None
        pols = [p for s, p in r.reductions if s == subjects[0]]
        return _opt(subjects), subjects[-1], _opt(pols), pols[0]

    @memo
    def reduction(self, run_id, subject, pol):
        r = self.result(run_id)
        if (subject, pol) not in r.reductions:
            msg = plots.message_figure("No cloaked revision with a baseline in this run.")
            return msg, msg, html.P("No cloak metrics in this run.")
        m = next(m for m in r.metrics if m["subject"] == subject and m["polarization"] == pol)
        curve = plots.add_band_average(F.fig_sector_curve(r, subject, pol), m)
        fmap = plots.add_bound_overlay(F.fig_reduction_map(r, subject, pol), r, subject, pol)
        sector = r.settings.get("sector_deg")
        bound = {"none": "measured (not floor-limited)", "lower": "lower bound (cloaked target near the floor)",
                 "upper": "upper bound (baseline near the floor)", "undetermined": "undetermined (both near the floor)"}
        if m["bound"] == "undetermined":
            band_text = "undetermined: the cloaked target and its baseline are both at the floor"
        else:
            k = (m.get("uncertainty_budget") or {}).get("band_reduction_db", {}).get("coverage_k",
                                                                                  r.settings.get("coverage_k", 2))
            band_text = (f"{m['band_reduction_db']:.2f} ± {_fmt(m['band_reduction_uncertainty_db'], '.2f')} dB "
                         f"(expanded, k = {k:g}; noise-corrected linear sums over band and sector, then dB)")
        stats = m.get("sector_reduction_db") or {}
        band_hz = r.settings.get("reporting_band_hz")
        facts = [
            ["band and sector", (f"{_ghz(band_hz[0])}–{_ghz(band_hz[1])} GHz; " if band_hz else "")
             + ("all angles" if not sector else f"{sector[0]:g}° to {sector[1]:g}°")
             + (f" ({m['sector_contents']})" if m.get("sector_contents") else "")],
            ["band-averaged reduction", band_text],
            ["value is", bound.get(m["bound"], m["bound"])],
            ["best reduction", f"{_fmt(m['best_reduction_db'])} dB at {_fmt((m['best_frequency_hz'] or 0) / 1e9, '.3f')} GHz"],
            ["bandwidth above threshold", f"{m['bandwidth_hz'] / 1e6:.0f} MHz"
                                          + (f" ({_ghz(m['bandwidth_start_hz'])}–{_ghz(m['bandwidth_stop_hz'])} GHz, "
                                             f"fractional {100 * m['fractional_bandwidth']:.1f} %)" if m["bandwidth_hz"] else "")
                                          + (", reaches a band edge" if m["bandwidth_truncated"] else "")],
            ["worst angle", f"{_fmt(m['worst_angle_deg'], 'g')}° ({_fmt(m['worst_angle_reduction_db'])} dB)"],
            ["per-point reduction over band and sector",
             ", ".join(f"{k} {v:.2f} dB" for k, v in stats.items() if v is not None) or "—"],
            ["floor-limited points", f"{m['floor_limited_points']} of {m['points']}"],
            ["mounting offset (subject − baseline)",
             f"{m['mounting_offset_deg']:.2f}°" + (" (aligned)" if m.get("angles_aligned") else "")
             if m.get("mounting_offset_deg") is not None else
             "none" + (f" ({m['mounting_offset_note']})" if m.get("mounting_offset_note") else "")],
            ["check-target max error", _fmt(m["check_error_db"], ".2f", " dB")],
        ]
        alarms = [check_failure_text(c) for c in r.checks if not c["passed"] and c["polarization"] == pol]
        alarms += [m["gate_mismatch"]] if m.get("gate_mismatch") else []
        budget = (m.get("uncertainty_budget") or {}).get("band_reduction_db")
        budget_box = html.Div(
            [html.H4("Uncertainty budget of the band-averaged reduction"),
             _table(uncertainty.budget_rows(budget), uncertainty.BUDGET_HEADER, "tbl budget")],
            id="red-budget") if budget else html.Div("No uncertainty budget: this run was processed before budgets "
                                                     "were made; process it again to see one.", id="red-budget",
                                                     className="note")
        return curve, fmap, html.Div([check_alarm(alarms), html.Div(
            [_table(facts, [f"{subject} against {m['baseline']}, {pol}", ""], "tbl facts"), budget_box],
            className="red-facts")])

    # ------------------------------------------------------------------ revisions
    def revisions(self, run_id, metric):
        r = self.result(run_id)
        rows = self.source.history(r.prototype)
        label = dict(TREND_METRICS).get(metric, metric)
        table = [{"revision": i["revision"], "note": i.get("note", ""), "parameters": format_parameters(i["parameters"])}
                 for i in self.source.revision_info(r.prototype)]
        return plots.fig_trend(rows, metric, label), table, f"prototype: {r.prototype}"

    def edit_revisions(self, run_id, data, previous) -> str:
        r = self.result(run_id)
        before = {row["revision"]: row for row in (previous or [])}
        changed = []
        for row in data or []:
            old = before.get(row["revision"])
            if old is None:
                continue
            if (row.get("note") or "") != (old.get("note") or ""):
                self.source.set_note(r.prototype, row["revision"], row.get("note") or "")
                changed.append(f"note of {row['revision']}")
            if (row.get("parameters") or "") != (old.get("parameters") or ""):
                new, prev = parse_parameters(row.get("parameters")), parse_parameters(old.get("parameters"))
                for k, v in new.items():
                    if prev.get(k) != v:
                        self.source.set_parameter(r.prototype, row["revision"], k, v)
                changed.append(f"parameters of {row['revision']}")
        return "saved: " + ", ".join(changed) if changed else ""

    # ------------------------------------------------------------------ safety
    @memo
    def safety(self, p_dbm, gain_dbi, distance_m, f_ghz, population, aperture_m=None):
        from ..safety import estimate_exposure

        try:
            if None in (p_dbm, gain_dbi, distance_m, f_ghz):
                raise InputError("fill in power, gain, distance and frequency")
            e = estimate_exposure(p_dbm, gain_dbi, distance_m, float(f_ghz) * 1e9, population,
                                  aperture_m=aperture_m if aperture_m not in (None, "") else None)
        except InputError as exc:
            return html.P(str(exc), className="error"), plots.message_figure(str(exc))
        near = e.near_field_warning()
        out = html.Div([
            html.P([html.Strong(f"{e.power_density_w_m2:.3g} W/m²"), f" at {distance_m:g} m: ",
                    html.Strong(f"{100 * e.ratio:.3g} %" if e.ratio < 10 else f"{e.ratio:.3g} times"),
                    f" {'of ' if e.ratio < 10 else ''}the {e.population} reference level "
                    f"({e.reference_level_w_m2:.3g} W/m² at {f_ghz:g} GHz): {e.verdict}."],
                   className="big" + (" over" if e.ratio > 1 else "")),
            html.P(("Near field: " + near) if near else f"Beyond the far-field distance ({e.aperture_note()}).",
                   className="error" if near else "hint", id="safe-near"),
            html.P("Indicative far-field estimate only, not a statement of compliance: local regulations and the "
                   "site's RF safety rules decide.", className="hint")])
        return out, plots.fig_safety(p_dbm, gain_dbi, e.reference_level_w_m2, distance_m, e.far_field_m)

    # ------------------------------------------------------------------ upload
    def start_upload(self, contents, filename) -> str:
        data = decode_upload(contents, filename)
        label = Path(filename or "upload.zip").name
        campaign = unpack_campaign(data, self.source.upload_root, label)
        dest = upload_folder(campaign.manifest.path, self.source.upload_root)
        total = sum(1 for c in campaign.cubes.values() if c.spec.role != "background") + 4

        def work(tick):
            try:  # a failed or cancelled upload leaves nothing behind; a recorded one keeps its folder
                result = process_campaign(campaign, ProcessSettings(), progress=tick)
                return self.source.record(campaign, result)
            except BaseException as exc:
                shutil.rmtree(dest, ignore_errors=True)
                if isinstance(exc, Exception) and not isinstance(exc, Cancelled):
                    raise upload_error(exc, dest, label) from None
                raise

        return self.jobs.start("upload", total, work, campaign=campaign.manifest.name)


def register(app, views: Views) -> None:
    """Wire the views' methods to the page's components."""

    @app.callback(Output("campaign-pol", "options"), Output("campaign-pol", "value"), Input("run", "value"))
    def _campaign_controls(run_id):
        return views.campaign_controls(run_id)

    @app.callback(Output("campaign-summary", "children"), Output("campaign-warnings", "children"),
                  Input("run", "value"))
    def _campaign_summary(run_id):
        return views.campaign_summary(run_id)

    # three callbacks, so the server draws them in parallel
    @app.callback(Output("fig-check", "figure"), Input("run", "value"), Input("campaign-pol", "value"))
    def _campaign_check(run_id, pol):
        return views.campaign_check(run_id, pol)

    @app.callback(Output("fig-floor", "figure"), Input("run", "value"), Input("campaign-pol", "value"))
    def _campaign_floor(run_id, pol):
        return views.campaign_floor(run_id, pol)

    @app.callback(Output("fig-coverage", "figure"), Input("run", "value"))
    def _campaign_coverage(run_id):
        return views.campaign_coverage(run_id)

    # ---- range and gate
    @app.callback(Output("gate-target", "options"), Output("gate-target", "value"), Output("gate-window", "value"),
                  Input("run", "value"))
    def _gate_targets(run_id):
        return views.gate_targets(run_id)

    @app.callback(Output("gate-pol", "options"), Output("gate-pol", "value"), Output("gate-angle", "options"),
                  Output("gate-angle", "value"), Output("gate-center", "value"), Output("gate-span", "value"),
                  Input("gate-target", "value"), State("run", "value"))
    def _gate_target_controls(target, run_id):
        return views.gate_target_controls(run_id, target)

    @app.callback(Output("fig-profile", "figure"),
                  Input("gate-target", "value"), Input("gate-pol", "value"), Input("gate-angle", "value"),
                  Input("gate-center", "value"), Input("gate-span", "value"), Input("gate-window", "value"),
                  State("run", "value"))
    def _profile(target, pol, angle, center, span, window, run_id):
        return views.range_profile(run_id, target, pol, angle, center, span, window)

    @app.callback(Output("gate-job", "data"), Output("gate-interval", "disabled"),
                  Output("gate-status", "children"), Output("gate-cancel", "disabled"),
                  Output("gate-keep", "disabled"),
                  Input("gate-run", "n_clicks"),
                  State("run", "value"), State("gate-target", "value"), State("gate-center", "value"),
                  State("gate-span", "value"), State("gate-window", "value"), State("gate-scope", "value"),
                  prevent_initial_call=True)
    def _start_regate(_n, run_id, target, center, span, window, scope):
        try:
            job = views.start_regate(run_id, target, center, span, window, scope)
        except InputError as exc:
            return no_update, True, str(exc), True, True
        return job, False, "working…", False, True

    @app.callback(Output("gate-bar", "style"), Output("gate-status", "children", allow_duplicate=True),
                  Output("gate-interval", "disabled", allow_duplicate=True),
                  Output("gate-cancel", "disabled", allow_duplicate=True),
                  Output("gate-keep", "disabled", allow_duplicate=True),
                  Output("fig-preview", "figure"), Output("gate-compare", "children"),
                  Input("gate-interval", "n_intervals"), State("gate-job", "data"),
                  State("gate-target", "value"), State("gate-pol", "value"), State("gate-angle", "value"),
                  prevent_initial_call=True)
    def _poll_regate(_n, job_id, target, pol, angle):
        frac, state, text = views.job_status(job_id)
        bar = {"width": f"{100 * frac:.0f}%"}
        if state == "running":
            return bar, text, False, False, True, no_update, no_update
        if state == "done":
            fig, table = views.preview(job_id, target, pol, angle)
            return bar, "preview ready: keep these settings to record them as a new run", True, True, False, fig, table
        return bar, text, True, True, True, no_update, no_update

    @app.callback(Output("gate-status", "children", allow_duplicate=True), Input("gate-cancel", "n_clicks"),
                  State("gate-job", "data"), prevent_initial_call=True)
    def _cancel(_n, job_id):
        views.jobs.cancel(job_id)
        return "cancelling…"

    @app.callback(Output("run", "options", allow_duplicate=True), Output("run", "value", allow_duplicate=True),
                  Output("gate-status", "children", allow_duplicate=True),
                  Output("gate-keep", "disabled", allow_duplicate=True),
                  Input("gate-keep", "n_clicks"), State("gate-job", "data"), prevent_initial_call=True)
    def _keep(_n, job_id):
        try:
            run_id = views.keep(job_id)
        except InputError as exc:
            return no_update, no_update, str(exc), True
        return views.run_options(), run_id, f"recorded as run {run_id}", True

    # ---- RCS
    @app.callback(Output("rcs-targets", "options"), Output("rcs-targets", "value"), Output("rcs-pol", "options"),
                  Output("rcs-pol", "value"), Output("rcs-angles", "options"), Output("rcs-angles", "value"),
                  Output("rcs-freqs", "options"), Output("rcs-freqs", "value"), Output("rcs-map-target", "options"),
                  Output("rcs-map-target", "value"), Input("run", "value"))
    def _rcs_controls(run_id):
        return views.rcs_controls(run_id)

    @app.callback(Output("fig-rcs-freq", "figure"), Input("run", "value"), Input("rcs-targets", "value"),
                  Input("rcs-pol", "value"), Input("rcs-angles", "value"))
    def _rcs_freq(run_id, targets, pol, angles):
        return views.rcs_frequency(run_id, targets, pol, angles)

    @app.callback(Output("fig-rcs-polar", "figure"), Input("run", "value"), Input("rcs-targets", "value"),
                  Input("rcs-pol", "value"), Input("rcs-freqs", "value"))
    def _rcs_polar(run_id, targets, pol, freqs):
        return views.rcs_polar(run_id, targets, pol, freqs)

    @app.callback(Output("fig-rcs-map", "figure"), Input("run", "value"), Input("rcs-map-target", "value"),
                  Input("rcs-pol", "value"))
    def _rcs_map(run_id, target, pol):
        return views.rcs_map(run_id, target, pol)

    # ---- reduction
    @app.callback(Output("red-subject", "options"), Output("red-subject", "value"), Output("red-pol", "options"),
                  Output("red-pol", "value"), Input("run", "value"))
    def _red_controls(run_id):
        return views.reduction_controls(run_id)

    @app.callback(Output("fig-red-curve", "figure"), Output("fig-red-map", "figure"), Output("red-metrics", "children"),
                  Input("run", "value"), Input("red-subject", "value"), Input("red-pol", "value"))
    def _reduction(run_id, subject, pol):
        return views.reduction(run_id, subject, pol)

    # ---- revisions
    @app.callback(Output("fig-trend", "figure"), Output("rev-table", "data"), Output("rev-prototype", "children"),
                  Input("run", "value"), Input("rev-metric", "value"))
    def _revisions(run_id, metric):
        return views.revisions(run_id, metric)

    @app.callback(Output("rev-status", "children"), Input("rev-table", "data_timestamp"),
                  State("rev-table", "data"), State("rev-table", "data_previous"), State("run", "value"),
                  prevent_initial_call=True)
    def _edit(_ts, data, previous, run_id):
        try:
            return views.edit_revisions(run_id, data, previous)
        except InputError as exc:
            return str(exc)

    # ---- safety
    from .images import register_images  # the Images view (its own module)

    register_images(app, views)
    from .bistatic_view import register_bistatic  # the Bistatic view (its own module)

    views.bistatic = register_bistatic(app, views)

    @app.callback(Output("safe-out", "children"), Output("fig-safety", "figure"), Input("safe-p", "value"),
                  Input("safe-g", "value"), Input("safe-r", "value"), Input("safe-f", "value"),
                  Input("safe-pop", "value"), Input("safe-a", "value"))
    def _safety(p, g, r, f, pop, a):
        return views.safety(p, g, r, f, pop, a)

    # ---- upload
    @app.callback(Output("upload-job", "data"), Output("upload-interval", "disabled"),
                  Output("upload-status", "children"), Output("upload-bar-box", "style"),
                  Input("upload", "contents"), State("upload", "filename"), prevent_initial_call=True)
    def _upload(contents, filename):
        try:
            job = views.start_upload(contents, filename)
        except InputError as exc:
            return no_update, True, html.Span(str(exc), className="error"), {"display": "none"}
        except Exception as exc:  # never a bare HTTP 500: the user gets one line
            return (no_update, True, html.Span(f"the upload failed: {type(exc).__name__}", className="error"),
                    {"display": "none"})
        return job, False, f"processing {filename}…", {"display": "block"}

    @app.callback(Output("upload-bar", "style"), Output("upload-status", "children", allow_duplicate=True),
                  Output("upload-interval", "disabled", allow_duplicate=True),
                  Output("run", "options", allow_duplicate=True), Output("run", "value", allow_duplicate=True),
                  Output("empty-banner", "style"),
                  Input("upload-interval", "n_intervals"), State("upload-job", "data"), prevent_initial_call=True)
    def _poll_upload(_n, job_id):
        frac, state, text = views.job_status(job_id)
        bar = {"width": f"{100 * frac:.0f}%"}
        if state == "running":
            return bar, text, False, no_update, no_update, no_update
        if state == "done":
            run_id = views.jobs.get(job_id).value
            return bar, f"added as run {run_id}", True, views.run_options(), run_id, {"display": "none"}
        return bar, html.Span(views.shown(text), className="error"), True, no_update, no_update, no_update
