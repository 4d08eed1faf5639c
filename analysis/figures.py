"""Plotly figures of a processing run, shared by the HTML report and the dashboard.

Every builder is a pure function of a :class:`~cloakrcs.process.ProcessingResult` (or of a
campaign / a raw sweep for the range profile) and returns a ``plotly.graph_objects.Figure``.
They only read results: no physics is redone here beyond evaluating a range profile of raw
sweeps and the analytic theory of a check target. What they send is decimated: at most
``MAX_POINTS`` points per trace (min/max per bucket, so peaks and nulls survive) and maps of
at most ``MAX_MAP`` (angles, frequencies) cells. Frequencies are shown in GHz, RCS in dBsm,
angles in degrees.
"""

from __future__ import annotations

import functools
from typing import Iterable, Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

MAX_POINTS = 2000
MAX_MAP = (200, 400)  # (angles, frequencies)
FONT = 'system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif'
PALETTE = ("#3b4a5a", "#1f7a8c", "#c0673a", "#6a8e3a", "#8a5a9e", "#b08a1e", "#4d7fb8")
DASHES = ("solid", "dash", "dot", "dashdot")
SECTOR_FILL = "rgba(31, 122, 140, 0.12)"


# --------------------------------------------------------------------------- helpers

def decimate(x, y, max_points: int = MAX_POINTS) -> tuple[np.ndarray, np.ndarray]:
    """Keep at most ``max_points`` points of y(x): the min and max of each of max_points/2 buckets.

    Order along x is kept; non-finite values are ignored when picking (a bucket of only NaN keeps
    its first point). Short traces are returned unchanged.
    """
    x, y = np.asarray(x), np.asarray(y, dtype=float)
    n = y.size
    if n <= max_points:
        return x, y
    buckets = max(1, max_points // 2)
    size = -(-n // buckets)
    pad = buckets * size - n
    yy = np.concatenate([y, np.full(pad, np.nan)]).reshape(buckets, size)
    finite = np.isfinite(yy)
    lo = np.where(finite, yy, np.inf).argmin(axis=1)
    hi = np.where(finite, yy, -np.inf).argmax(axis=1)
    offset = np.arange(buckets) * size
    idx = np.unique(np.concatenate([lo + offset, hi + offset]))
    idx = idx[idx < n]
    return x[idx], y[idx]


def stride_indices(n: int, max_n: int) -> np.ndarray:
    """At most ``max_n`` evenly spread indices of range(n), first and last included."""
    if n <= max_n:
        return np.arange(n)
    return np.unique(np.round(np.linspace(0, n - 1, max_n)).astype(int))


def _db10(x) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 10 * np.log10(np.asarray(x, dtype=float))


def _ghz(f_hz) -> np.ndarray:
    return np.asarray(f_hz, dtype=float) / 1e9


@functools.lru_cache(maxsize=1)
def _template():
    """The plotly template, resolved once (naming it costs its lookup in every figure)."""
    import plotly.io as pio

    return pio.templates["simple_white"]


TITLE_CHARS = 120  # a title longer than this is cut (names can be long)


def _base_layout(fig: go.Figure, title: str, height: int = 420) -> go.Figure:
    fig.update_layout(
        template=_template(),
        title={"text": title if len(title) <= TITLE_CHARS else title[:TITLE_CHARS - 1] + "…", "x": 0.0,
               "xref": "paper", "xanchor": "left", "font": {"size": 15}},
        font={"family": FONT, "size": 12, "color": "#1d2733"}, height=height,
        margin={"l": 64, "r": 24, "t": 44, "b": 96},
        legend={"orientation": "h", "yanchor": "top", "y": -0.16, "xanchor": "left", "x": 0.0,
                "font": {"size": 11}},
        hovermode="closest")
    fig.update_xaxes(showgrid=True, gridcolor="#e6e9ee", zeroline=False)
    fig.update_yaxes(showgrid=True, gridcolor="#e6e9ee", zeroline=False)
    return fig


def _nearest(values, wanted) -> int:
    return int(np.argmin(np.abs(np.asarray(values, dtype=float) - float(wanted))))


def _wrap(a):
    return (np.asarray(a, dtype=float) + 180.0) % 360.0 - 180.0


def main_angles(result, subject: str, pol: str, limit: int = 3) -> list[float]:
    """Angles worth a frequency plot: nearest 0 deg, the baseline's main lobe, the worst angle."""
    from .metrics import sector_mask

    t = result.targets[subject]
    angles = t.amplitude.angle.values
    inside = sector_mask(angles, result.settings.get("sector_deg"))
    angles = angles[inside] if inside.any() else angles  # examples are drawn inside the sector
    picks = [angles[_nearest(np.abs(_wrap(angles)), 0.0)]]
    base = result.targets.get(t.baseline) if t.baseline else None
    if base is not None and pol in base.amplitude.polarization.values:
        band = result.band_mask
        b_angles = base.amplitude.angle.values
        b_in = sector_mask(b_angles, result.settings.get("sector_deg"))
        lobe = np.where(b_in if b_in.any() else True, base.sigma.sel(polarization=pol).values[:, band].mean(axis=1),
                        -np.inf)
        picks.append(b_angles[int(np.argmax(lobe))])
    for m in result.metrics:
        if m["subject"] == subject and m["polarization"] == pol and m["worst_angle_deg"] is not None:
            picks.append(m["worst_angle_deg"])
    out: list[float] = []
    for a in picks:
        a = float(angles[_nearest(angles, a)])
        if a not in out:
            out.append(a)
    return out[:limit]


# --------------------------------------------------------------------------- figures

def fig_rcs_vs_frequency(result, target_names: Sequence[str], pol: str, angles: Iterable[float],
                         show_floor: bool = True) -> go.Figure:
    """RCS (dBsm) versus frequency (GHz) over the valid band, one trace per target and angle.

    The nearest measured angle is used; each target's noise floor (dashed, thin) is drawn once
    when ``show_floor``. The reporting band is shaded.
    """
    fig = go.Figure()
    valid = result.valid_mask
    f = _ghz(result.frequency_hz[valid])
    angles = list(angles)
    for it, name in enumerate(target_names):
        t = result.targets[name]
        if pol not in t.amplitude.polarization.values:
            continue
        color = PALETTE[it % len(PALETTE)]
        sig = t.sigma.sel(polarization=pol)
        for ia, a in enumerate(angles):
            k = _nearest(sig.angle.values, a)
            x, y = decimate(f, _db10(sig.values[k, valid]))
            fig.add_trace(go.Scatter(
                x=x, y=y, mode="lines", name=f"{name} {float(sig.angle.values[k]):g}°",
                line={"color": color, "width": 1.8, "dash": DASHES[ia % len(DASHES)]},
                hovertemplate="%{x:.3f} GHz<br>%{y:.2f} dBsm<extra>%{fullData.name}</extra>"))
        if show_floor:
            x, y = decimate(f, _db10(t.floor.sel(polarization=pol).values[valid]))
            fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"{name} floor",
                                     line={"color": color, "width": 1, "dash": "dot"}, opacity=0.6,
                                     hovertemplate="%{x:.3f} GHz<br>floor %{y:.2f} dBsm<extra></extra>"))
    _shade_band(fig, result)
    fig.update_xaxes(title_text="frequency (GHz)")
    fig.update_yaxes(title_text="RCS (dBsm)")
    return _base_layout(fig, f"RCS versus frequency, {pol}")


def _shade_band(fig: go.Figure, result) -> None:
    band = result.settings.get("reporting_band_hz")
    valid = result.settings.get("valid_band_hz")
    if band and valid and (band[0] > valid[0] or band[1] < valid[1]):
        fig.add_vrect(x0=band[0] / 1e9, x1=band[1] / 1e9, fillcolor=SECTOR_FILL, line_width=0, layer="below")


POLAR_ROTATION_DEG = 90.0  # data angle 0 at the top, angles counter-clockwise


def polar_sector(start_deg: float, stop_deg: float) -> list[float]:
    """Plotly's polar ``sector`` for data angles START..STOP: it is given in the axis frame
    (degrees counter-clockwise from the right), so the rotation is added to the data angles."""
    return [start_deg + POLAR_ROTATION_DEG, stop_deg + POLAR_ROTATION_DEG]


def fig_polar(result, target_names: Sequence[str], pol: str, frequencies_hz: Iterable[float]) -> go.Figure:
    """Polar RCS patterns (dBsm versus angle) at the nearest sample of each chosen frequency."""
    fig = go.Figure()
    f = result.frequency_hz
    rmin, rmax, amin, amax = np.inf, -np.inf, np.inf, -np.inf
    for it, name in enumerate(target_names):
        t = result.targets[name]
        if pol not in t.amplitude.polarization.values:
            continue
        sig = t.sigma.sel(polarization=pol)
        order = np.argsort(_wrap(sig.angle.values))
        theta = _wrap(sig.angle.values)[order]
        amin, amax = min(amin, theta[0]), max(amax, theta[-1])
        for jf, fw in enumerate(frequencies_hz):
            k = _nearest(f, fw)
            r = _db10(sig.values[order, k])
            th, r = decimate(theta, r)
            closed = theta.size > 2 and (theta[-1] - theta[0]) > 300
            if closed:
                th, r = np.append(th, th[0]), np.append(r, r[0])
            fin = r[np.isfinite(r)]
            if fin.size:
                rmin, rmax = min(rmin, fin.min()), max(rmax, fin.max())
            fig.add_trace(go.Scatterpolar(
                theta=th, r=r, mode="lines+markers" if theta.size < 40 else "lines",
                name=f"{name} {f[k] / 1e9:.3f} GHz",
                line={"color": PALETTE[it % len(PALETTE)], "width": 1.6, "dash": DASHES[jf % len(DASHES)]},
                marker={"size": 4},
                hovertemplate="%{theta:.1f}°<br>%{r:.2f} dBsm<extra>%{fullData.name}</extra>"))
    if np.isfinite(rmin):
        lo = 10 * np.floor(max(rmin, rmax - 60) / 10)
        fig.update_polars(radialaxis={"range": [lo, 10 * np.ceil(rmax / 10)], "ticksuffix": " dBsm",
                                      "gridcolor": "#e6e9ee", "angle": 90, "tickangle": 90},
                          angularaxis={"direction": "counterclockwise", "rotation": POLAR_ROTATION_DEG,
                                       "gridcolor": "#e6e9ee"})
    if np.isfinite(amin) and amax - amin < 300:  # a partial turn: show only the measured sector
        pad = max(1.0, 0.05 * (amax - amin))
        fig.update_polars(sector=polar_sector(amin - pad, amax + pad))
    return _base_layout(fig, f"Polar RCS patterns (dBsm), {pol}", height=560)


def fig_reduction_map(result, subject: str, pol: str) -> go.Figure:
    """Heatmap of reduction (dB) over angle and frequency (valid band); floor bounds in the hover."""
    ds = result.reductions[(subject, pol)]
    angles = ds.angle.values
    order = np.argsort(_wrap(angles))
    ia = order[stride_indices(order.size, MAX_MAP[0])]
    jf = stride_indices(ds.frequency.size, MAX_MAP[1])
    z = ds["reduction_db"].values[np.ix_(ia, jf)]
    bound = ds["bound"].values[np.ix_(ia, jf)].astype(str)
    finite = z[np.isfinite(z)]
    zmax = float(np.max(np.abs(finite))) if finite.size else 1.0
    fig = go.Figure(go.Heatmap(
        x=_ghz(ds.frequency.values[jf]), y=_wrap(angles[ia]), z=z, customdata=bound,
        colorscale="RdBu", zmid=0.0, zmin=-zmax, zmax=zmax,
        colorbar={"title": {"text": "dB", "side": "right"}, "thickness": 14},
        hovertemplate="%{x:.3f} GHz, %{y:.1f}°<br>reduction %{z:.2f} dB<br>bound: %{customdata}<extra></extra>"))
    fig.update_xaxes(title_text="frequency (GHz)", showgrid=False)
    fig.update_yaxes(title_text="angle (deg)", showgrid=False)
    t = result.targets[subject]
    return _base_layout(fig, f"Reduction {t.baseline} → {subject}, {pol} (positive = less scattering)",
                        height=460)


def fig_check(result, check_row: dict, specular_deg: float | None = None) -> go.Figure:
    """Check target against theory: measured and theory RCS at the angle nearest specular (top; theory
    at that measured angle), the run's error curve 10 log10(measured / theory) with the tolerance band
    (bottom). ``specular_deg`` defaults to the check row's own."""
    from .references import reference_amplitude

    if specular_deg is None:
        specular_deg = float(check_row.get("specular_deg") or 0.0)

    name, pol = check_row["target"], check_row["polarization"]
    t = result.targets[name]
    valid = result.valid_mask
    f_hz = result.frequency_hz[valid]
    f = _ghz(f_hz)
    sig = t.sigma.sel(polarization=pol)
    k = _nearest(np.abs(_wrap(sig.angle.values - specular_deg)), 0.0)
    angle = float(sig.angle.values[k])
    theory = np.abs(reference_amplitude(check_row["shape"], f_hz, np.array([_wrap(angle - specular_deg)]),
                                        pol)[0]) ** 2
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, row_heights=[0.62, 0.38], vertical_spacing=0.07)
    for y, label, color, dash in ((_db10(sig.values[k, valid]), f"measured {angle:g}°", PALETTE[1], "solid"),
                                  (_db10(theory), f"theory ({check_row['shape'].get('shape')})", PALETTE[2],
                                   "dash")):
        x, yy = decimate(f, y)
        fig.add_trace(go.Scatter(x=x, y=yy, mode="lines", name=label, line={"color": color, "width": 1.8,
                                                                            "dash": dash},
                                 hovertemplate="%{x:.3f} GHz<br>%{y:.2f} dBsm<extra></extra>"), row=1, col=1)
    tol = float(check_row["tolerance_db"])
    x, y = decimate(f, np.asarray(check_row["error_curve_db"], dtype=float))
    fig.add_hrect(y0=-tol, y1=tol, fillcolor=SECTOR_FILL, line_width=0, layer="below", row=2, col=1)
    fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name="error", line={"color": PALETTE[0], "width": 1.4},
                             hovertemplate="%{x:.3f} GHz<br>%{y:.3f} dB<extra></extra>"), row=2, col=1)
    fig.update_yaxes(title_text="RCS (dBsm)", row=1, col=1)
    fig.update_yaxes(title_text="error (dB)", row=2, col=1)
    fig.update_xaxes(title_text="frequency (GHz)", row=2, col=1)
    verdict = "pass" if check_row["passed"] else "FAIL"
    return _base_layout(fig, f"Check target {name}, {pol}: max error {check_row['max_error_db']:.2f} dB "
                             f"(tolerance ±{tol:g} dB, {verdict})", height=500)


def range_profile_db(frequency_hz, sweep, window="kaiser", kaiser_beta=6.0, pad_factor=4):
    """(range_m, 20 log10 |profile|) of one sweep, via cloakrcs.timedomain.range_profile."""
    from .timedomain import range_profile

    r, p = range_profile(frequency_hz, np.asarray(sweep), window, kaiser_beta, pad_factor)
    with np.errstate(divide="ignore"):
        return r, 20 * np.log10(np.abs(p))


def campaign_sweeps(campaign, target: str | None = None, pol: str | None = None, angle_deg: float = 0.0):
    """(name, pol, angle, raw sweep, background-subtracted sweep) of one target of a campaign.

    Repeats are averaged; the background is its repeat mean at its angle nearest ``angle_deg``.
    Default target: the first subject that is a baseline of another (else the first subject).
    """
    m = campaign.manifest
    if target is None:
        subjects = m.by_role("subject")
        baselines = {t.baseline for t in subjects if t.baseline}
        target = next((t.name for t in subjects if t.name in baselines), subjects[0].name)
    cube = campaign.cube(target)
    pol = pol or cube.polarizations[0]
    ip = cube.polarizations.index(pol)
    ia = _nearest(np.abs(_wrap(cube.angles_deg - angle_deg)), 0.0)
    raw = cube.data.values[ip, ia].mean(axis=0)
    bg_spec = m.background_of(cube.spec)
    if bg_spec is None:  # no background measured: nothing is subtracted
        return target, pol, float(cube.angles_deg[ia]), raw, raw
    bg = campaign.cube(bg_spec.name)
    bgi = _nearest(np.abs(_wrap(bg.angles_deg - cube.angles_deg[ia])), 0.0)
    bg_s = bg.data.sel(polarization=pol).values[bgi].mean(axis=0)
    return target, pol, float(cube.angles_deg[ia]), raw, raw - bg_s


def fig_range_profile(campaign_or_sweep, target: str | None = None, pol: str | None = None, angle_deg: float = 0.0,
                      gate: dict | None = None, window: str = "kaiser", kaiser_beta: float = 6.0,
                      pad_factor: int = 4, edge_fraction: float = 0.2) -> go.Figure:
    """Range profile (dB) with the gate drawn over it.

    ``campaign_or_sweep``: a Campaign (raw and background-subtracted profiles of ``target``) or a
    tuple (frequency_hz, sweep[, label]). ``gate``: {center_m, span_m}; the gate shape (0..1, right
    axis) is cloakrcs.timedomain.gate_shape with edges ``edge_fraction`` of the span.
    """
    from .timedomain import gate_shape

    fig = make_subplots(specs=[[{"secondary_y": True}]])
    if isinstance(campaign_or_sweep, tuple):
        freq, sweep = campaign_or_sweep[0], campaign_or_sweep[1]
        label = campaign_or_sweep[2] if len(campaign_or_sweep) > 2 else "sweep"
        curves = [(label, sweep, PALETTE[1])]
        title = f"Range profile, {label}"
    else:
        freq = campaign_or_sweep.frequency_hz
        name, pol, angle, raw, sub = campaign_sweeps(campaign_or_sweep, target, pol, angle_deg)
        curves = [("raw", raw, "#9aa5b1"), ("background subtracted", sub, PALETTE[1])]
        title = f"Range profile, {name} {pol} {angle:g}°"
    r, top = None, -np.inf
    for label, s, color in curves:
        r, p = range_profile_db(freq, s, window, kaiser_beta, pad_factor)
        top = max(top, float(np.nanmax(np.where(np.isfinite(p), p, -np.inf))))
        x, y = decimate(r, p)
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=label, line={"color": color, "width": 1.4},
                                 hovertemplate="%{x:.3f} m<br>%{y:.1f} dB<extra>%{fullData.name}</extra>"),
                      secondary_y=False)
    if gate and r is not None:
        g = gate_shape(r, gate["center_m"], gate["span_m"], edge_fraction * gate["span_m"])
        x, y = decimate(r, g)
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"gate {gate['center_m']:.3f} m ± "
                                                          f"{gate['span_m'] / 2:.3f} m",
                                 line={"color": PALETTE[2], "width": 1.4, "dash": "dash"},
                                 hovertemplate="%{x:.3f} m<br>gate %{y:.2f}<extra></extra>"), secondary_y=True)
        fig.update_yaxes(title_text="gate", range=[0, 1.05], tickmode="array", tickvals=[0, 0.5, 1],
                         showgrid=False, secondary_y=True)
    fig.update_xaxes(title_text="range from the reference plane (m)")
    if np.isfinite(top):
        fig.update_yaxes(range=[top - 100, top + 5], secondary_y=False)
    fig.update_yaxes(title_text="|profile| (dB)", secondary_y=False)
    return _base_layout(fig, title)


def fig_sector_curve(result, subject: str, pol: str) -> go.Figure:
    """Sector curve R(f) over the reporting band with the threshold, bandwidth and best point."""
    row = next(m for m in result.metrics if m["subject"] == subject and m["polarization"] == pol)
    thr = float(result.settings["threshold_db"])
    x, y = decimate(_ghz(row["sector_curve_frequency_hz"]), np.asarray(row["sector_curve_db"], dtype=float))
    fig = go.Figure()
    if row["bandwidth_hz"]:
        fig.add_vrect(x0=row["bandwidth_start_hz"] / 1e9, x1=row["bandwidth_stop_hz"] / 1e9,
                      fillcolor=SECTOR_FILL, line_width=0, layer="below")
    fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name="sector reduction R(f)",
                             line={"color": PALETTE[1], "width": 1.8},
                             hovertemplate="%{x:.3f} GHz<br>%{y:.2f} dB<extra></extra>"))
    fig.add_hline(y=thr, line={"color": PALETTE[0], "width": 1, "dash": "dash"},
                  annotation_text=f"threshold {thr:g} dB", annotation_position="bottom right")
    if row["best_frequency_hz"] is not None and row["best_reduction_db"] is not None:
        fig.add_trace(go.Scatter(x=[row["best_frequency_hz"] / 1e9], y=[row["best_reduction_db"]], mode="markers",
                                 name=f"best {row['best_reduction_db']:.2f} dB", marker={"color": PALETTE[2],
                                                                                        "size": 9},
                                 hovertemplate="%{x:.3f} GHz<br>%{y:.2f} dB<extra>best</extra>"))
    fig.update_xaxes(title_text="frequency (GHz)")
    fig.update_yaxes(title_text="reduction (dB)")
    return _base_layout(fig, f"Sector reduction {row['baseline']} → {subject}, {pol}")
