"""The Images view: calibrated ISAR image of a target or revision, its difference against the
baseline, the scattering centres and the centres tracked across the run's revisions.

The images are computed by cloakrcs.imaging from the stored calibrated amplitudes; figures come
from cloakrcs.imaging_figures. Logic lives in :class:`ImageViews` (testable without a browser).
"""

from __future__ import annotations

import threading
from collections import OrderedDict

from dash import Input, Output, dcc, html

from .. import imaging
from .. import imaging_figures as IF
from ..errors import InputError
from ..metrics import parse_sector


def images_view() -> html.Div:
    from .layout import _field, _graph, _pol_radio

    text = {"type": "text", "debounce": True, "className": "num"}
    return html.Div(className="view", children=[
        html.P("ISAR image of a calibrated target over a sector and band (down-range x cross-range, relative to "
               "the turntable axis; antenna below). Scattering centres by CLEAN; floor-limited ones are crossed.",
               className="hint"),
        html.Div(className="controls", children=[
            _field("Target or revision", dcc.Dropdown(id="img-target", clearable=False), width="16rem"),
            _field("Polarization", _pol_radio("img-pol"), width="9rem"),
            _field("Sector (deg, START:STOP)", dcc.Input(id="img-sector", placeholder="default", **text), width="11rem"),
            _field("Band (GHz, START:STOP)", dcc.Input(id="img-band", placeholder="reporting band", **text),
                   width="11rem"),
            _field("Dynamic range (dB)", dcc.Input(id="img-dynamic", type="number", value=40, min=5, max=120,
                                                   debounce=True, className="num"), width="9rem"),
            _field("Method", dcc.Dropdown(id="img-method", value="auto", clearable=False,
                                          options=[{"label": "auto", "value": "auto"},
                                                   {"label": "polar format", "value": "polar"},
                                                   {"label": "back-projection", "value": "backprojection"}]),
                   width="11rem"),
        ]),
        html.Div(id="img-status", className="status"),
        html.Div(className="row", children=[html.Div(_graph("fig-img"), className="col"),
                                            html.Div(_graph("fig-img-base"), className="col")]),
        html.Div(className="row", children=[html.Div(_graph("fig-img-diff"), className="col"),
                                            html.Div(_graph("fig-img-change"), className="col")]),
        html.H3("Scattering centres of this image"),
        html.Div(id="img-centres"),
        html.H3("Centres tracked across the revisions of this run (stored by cloakrcs process)"),
        html.Div(id="img-tracks"),
    ])


def _parse(text, flag, scale=1.0):
    if not text or not str(text).strip():
        return None
    if flag == "sector":
        return parse_sector(str(text).strip())
    try:
        a, b = (float(x) * scale for x in str(text).split(":"))
    except ValueError:
        raise InputError(f"band {text!r}: expected START:STOP in GHz") from None
    return a, b


def _table(rows, header):
    return html.Table(className="tbl", children=[html.Thead(html.Tr([html.Th(h) for h in header])),
                                                 html.Tbody([html.Tr([html.Td(c) for c in r]) for r in rows])])


class ImageViews:
    """The Images view's logic over a :class:`cloakrcs.dashboard.callbacks.Views`."""

    def __init__(self, views):
        self.views = views
        self._cache: OrderedDict = OrderedDict()
        self._cache_lock = threading.Lock()

    def controls(self, run_id):
        r = self.views.result(run_id)
        names = [n for n, t in r.targets.items() if t.role == "subject" and imaging.imageable(r, n)]
        if not names:
            return [], None, [], None
        opts = [{"label": n if r.targets[n].revision in (n, "") else f"{n} ({r.targets[n].revision})", "value": n}
                for n in names]
        default = next((n for n in names if r.targets[n].baseline), names[0])
        pols = [str(p) for p in r.targets[default].amplitude.polarization.values]
        return opts, default, [{"label": p, "value": p} for p in pols], ("VV" if "VV" in pols else pols[0])

    def images(self, run_id, target, pol, sector_text, band_text, dynamic, method):
        from dataclasses import replace

        from .plots import message_figure

        key = (run_id, target, pol, sector_text, band_text, dynamic, method)
        with self._cache_lock:
            if key in self._cache:
                self._cache.move_to_end(key)
                return self._cache[key]
        r = self.views.result(run_id)
        empty = message_figure("")
        if target not in r.targets or pol is None:
            msg = message_figure("No target measured at enough angles to image.")
            return msg, empty, empty, empty, html.P("—"), html.P("—"), ""
        dyn = float(dynamic or 40.0)
        try:
            sector = _parse(sector_text, "sector")
            band = _parse(band_text, "band", 1e9)
            settings = imaging.ImageSettings(method=method or "auto",
                                             floor_margin_db=r.settings.get("floor_margin_db", 10.0))
            img = imaging.image_of_result(r, target, pol, sector, band, settings)
            base_name = r.targets[target].baseline
            base = None
            if base_name and pol in [str(p) for p in r.targets[base_name].amplitude.polarization.values]:
                base = imaging.image_of_result(r, base_name, pol, sector, band,
                                               replace(settings, method=img.method),
                                               extent_m=img.settings.extent_m)
            centres = imaging.scattering_centres(img, 10)
        except InputError as exc:
            msg = message_figure(str(exc))
            return msg, empty, empty, empty, html.P(str(exc)), html.P("—"), str(exc)
        fig = IF.fig_image(img, dyn, centres)
        if base is not None:
            fb = IF.fig_image(base, dyn)
            try:
                fd, fc = IF.fig_difference(img, base, dyn)
            except InputError as exc:
                fd = fc = message_figure(str(exc))
        else:
            fb = fd = fc = message_figure(f"{target} has no baseline: no difference image.")
        rows = [[c["rank"], f"{c['down_range_m']:+.3f}", f"{c['cross_range_m']:+.3f}", f"{c['rcs_dbsm']:.1f}",
                 "yes" if c["floor_limited"] else "no"] for c in centres]
        ctable = _table(rows, ["rank", "down-range (m)", "cross-range (m)", "RCS (dBsm)", "floor-limited"])
        tracks, revisions = imaging.tracked_centres_of_result(r, pol)
        if tracks:
            ttable = _table(IF.track_rows(tracks, revisions),
                            ["track", "down-range (m)", "cross-range (m)"] + [f"{x} (dBsm)" for x in revisions])
            sentences = imaging.describe_tracks(tracks, revisions)
            ttable = html.Div([ttable, html.Ul([html.Li(s) for s in sentences[:12]])])
        else:
            ttable = html.P("No stored scattering centres of revisions with a baseline in this run.")
        out = (fig, fb, fd, fc, ctable, ttable, IF.image_caption(img))
        with self._cache_lock:
            self._cache[key] = out
            while len(self._cache) > 64:
                self._cache.popitem(last=False)
        return out


def register_images(app, views) -> ImageViews:
    iv = ImageViews(views)
    views.images = iv

    @app.callback(Output("img-target", "options"), Output("img-target", "value"), Output("img-pol", "options"),
                  Output("img-pol", "value"), Input("run", "value"))
    def _img_controls(run_id):
        return iv.controls(run_id)

    @app.callback(Output("fig-img", "figure"), Output("fig-img-base", "figure"), Output("fig-img-diff", "figure"),
                  Output("fig-img-change", "figure"), Output("img-centres", "children"),
                  Output("img-tracks", "children"), Output("img-status", "children"),
                  Input("run", "value"), Input("img-target", "value"), Input("img-pol", "value"),
                  Input("img-sector", "value"), Input("img-band", "value"), Input("img-dynamic", "value"),
                  Input("img-method", "value"))
    def _img(run_id, target, pol, sector, band, dynamic, method):
        return iv.images(run_id, target, pol, sector, band, dynamic, method)

    return iv
