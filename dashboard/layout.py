"""The page: a header with the run selector and the upload, the RF caution on every view, eight views."""

from __future__ import annotations

from dash import dash_table, dcc, html

from ..safety import CAUTION

from .upload import MAX_COMPRESSED_BYTES

VIEWS = (("campaign", "Campaign"), ("gate", "Range & gate"), ("rcs", "RCS"), ("reduction", "Reduction"),
         ("revisions", "Revisions"), ("images", "Images"), ("bistatic", "Bistatic"),
         ("safety", "RF safety"))
WINDOWS = ("kaiser", "hann", "rect")
TREND_METRICS = (("band_reduction_db", "band-averaged reduction (dB)"), ("bandwidth_hz", "bandwidth above threshold (MHz)"),
                 ("worst_angle_reduction_db", "worst-angle reduction (dB)"), ("check_error_db", "check-target max error (dB)"))


def _field(label: str, control, width: str = "14rem") -> html.Div:
    return html.Div([html.Label(label, className="field-label"), control], className="field", style={"width": width})


EMPTY_TEXT = "Nothing to show yet: choose a processing run above (or add a campaign zip)."
EMPTY_TEXTS = {"fig-preview": "Reprocess with new gate settings to compare them here with the stored run.",
               "fig-safety": "Fill in power, gain, distance and frequency for an estimate."}


def _graph(id_: str) -> dcc.Graph:
    """A graph that shows a short sentence, not blank axes, until its callback draws it."""
    from .plots import message_figure

    return dcc.Graph(id=id_, config={"displaylogo": False, "responsive": True}, className="graph",
                     figure=message_figure(EMPTY_TEXTS.get(id_, EMPTY_TEXT)))


def _pol_radio(id_: str) -> dcc.RadioItems:
    return dcc.RadioItems(id=id_, options=[], value=None, inline=True, className="radio")


def header(runs_options, run_value) -> html.Div:
    return html.Div(className="header", children=[
        html.Div([html.H1("cloakrcs"), html.Span("RCS results of cloak prototypes", className="subtitle")],
                 className="brand"),
        _field("Processing run", dcc.Dropdown(id="run", options=runs_options, value=run_value, clearable=False),
               width="30rem"),
        html.Div(className="upload-box", children=[
            dcc.Upload(id="upload", children=html.Div(["Add a campaign: drop a .zip here or ", html.A("choose one")]),
                       accept=".zip", max_size=MAX_COMPRESSED_BYTES, multiple=False, className="upload"),
            html.Div(id="upload-status", className="status"),
            html.Div(html.Div(id="upload-bar", className="bar-fill", style={"width": "0%"}), className="bar",
                     id="upload-bar-box", style={"display": "none"}),
        ]),
    ])


def caution_banner() -> html.Div:
    return html.Div(id="caution", className="caution", role="note",
                    children=[html.Strong("RF safety. "), CAUTION,
                              " See the RF safety view for an indicative power-density estimate."])


def campaign_view() -> html.Div:
    return html.Div(className="view", children=[
        html.Div(id="campaign-summary", className="summary"),
        html.Div(id="campaign-warnings"),
        _field("Polarization", _pol_radio("campaign-pol")),
        html.Div(className="row", children=[html.Div(_graph("fig-check"), className="col"),
                                            html.Div(_graph("fig-floor"), className="col")]),
        _graph("fig-coverage"),
    ])


def gate_view() -> html.Div:
    num = {"type": "number", "debounce": True, "className": "num"}
    return html.Div(className="view", children=[
        html.P("Pick a sweep, move the gate, then reprocess the campaign from its stored raw sweeps to see the "
               "effect on RCS. Keeping the new settings records a new processing run.", className="hint"),
        html.Div(className="controls", children=[
            _field("Target", dcc.Dropdown(id="gate-target", clearable=False)),
            _field("Polarization", _pol_radio("gate-pol"), width="9rem"),
            _field("Angle (deg)", dcc.Dropdown(id="gate-angle", clearable=False), width="9rem"),
            _field("Gate centre (m)", dcc.Input(id="gate-center", step=0.005, **num), width="9rem"),
            _field("Gate span (m)", dcc.Input(id="gate-span", step=0.005, min=0.01, **num), width="9rem"),
            _field("Window", dcc.Dropdown(id="gate-window", options=list(WINDOWS), clearable=False), width="9rem"),
            _field("Apply the gate to", dcc.RadioItems(id="gate-scope", inline=True, value="target",
                                                       options=[{"label": "this target", "value": "target"},
                                                                {"label": "all targets", "value": "*"}]),
                   width="16rem"),
        ]),
        _graph("fig-profile"),
        html.Div(className="controls", children=[
            html.Button("Reprocess with these settings", id="gate-run", className="btn primary"),
            html.Button("Cancel", id="gate-cancel", className="btn", disabled=True),
            html.Button("Keep these settings (new run)", id="gate-keep", className="btn", disabled=True),
            html.Div(html.Div(id="gate-bar", className="bar-fill", style={"width": "0%"}), className="bar wide"),
            html.Div(id="gate-status", className="status"),
        ]),
        _graph("fig-preview"),
        html.Div(id="gate-compare"),
    ])


def rcs_view() -> html.Div:
    return html.Div(className="view", children=[
        html.Div(className="controls", children=[
            _field("Targets (bare and cloaked overlaid)", dcc.Dropdown(id="rcs-targets", multi=True), width="26rem"),
            _field("Polarization", _pol_radio("rcs-pol"), width="9rem"),
            _field("Angles (deg)", dcc.Dropdown(id="rcs-angles", multi=True), width="16rem"),
            _field("Frequencies (GHz)", dcc.Dropdown(id="rcs-freqs", multi=True), width="18rem"),
        ]),
        _graph("fig-rcs-freq"),
        html.Div(className="row", children=[
            html.Div(_graph("fig-rcs-polar"), className="col"),
            html.Div([_field("Map of", dcc.Dropdown(id="rcs-map-target", clearable=False)), _graph("fig-rcs-map")],
                     className="col"),
        ]),
    ])


def reduction_view() -> html.Div:
    return html.Div(className="view", children=[
        html.Div(className="controls", children=[
            _field("Cloaked revision", dcc.Dropdown(id="red-subject", clearable=False)),
            _field("Polarization", _pol_radio("red-pol"), width="9rem"),
        ]),
        html.Div(id="red-metrics", className="summary"),
        _graph("fig-red-curve"),
        _graph("fig-red-map"),
    ])


def revisions_view() -> html.Div:
    return html.Div(className="view", children=[
        html.Div(className="controls", children=[
            _field("Metric", dcc.Dropdown(id="rev-metric", options=[{"label": l, "value": v} for v, l in TREND_METRICS],
                                          value="band_reduction_db", clearable=False), width="22rem"),
            html.Div(id="rev-prototype", className="status"),
        ]),
        _graph("fig-trend"),
        html.H3("Notes and design parameters (click a cell to edit; parameters as key = value; key = value)"),
        dash_table.DataTable(id="rev-table", editable=True, row_deletable=False,
                             columns=[{"name": "revision", "id": "revision", "editable": False},
                                      {"name": "note", "id": "note"}, {"name": "parameters", "id": "parameters"}],
                             style_cell={"textAlign": "left", "fontFamily": "inherit", "padding": "6px",
                                         "whiteSpace": "normal", "height": "auto"},
                             style_header={"fontWeight": "600", "backgroundColor": "#eef2f4"}),
        html.Div(id="rev-status", className="status"),
    ])


def safety_view() -> html.Div:
    num = {"type": "number", "debounce": True, "className": "num"}
    return html.Div(className="view", children=[
        html.P(["Far-field estimate S = P G / (4 π r²) against the ICNIRP 2020 whole-body reference level "
                "(Table 5; values from memory, see README, RF safety). It holds beyond the far-field distance "
                "2 D²/λ of the antenna's aperture D; without an aperture, D comes from the gain, G = 0.5 (π D/λ)² "
                "(an assumed aperture efficiency of 0.5). ",
                html.Strong("Indicative only: it is not a compliance assessment. Local regulations and the site's "
                            "RF safety rules apply.")], className="hint"),
        html.Div(className="controls", children=[
            _field("Transmit power (dBm)", dcc.Input(id="safe-p", value=30, **num), width="11rem"),
            _field("Antenna gain (dBi)", dcc.Input(id="safe-g", value=20, **num), width="11rem"),
            _field("Distance (m)", dcc.Input(id="safe-r", value=1.0, min=0.01, **num), width="9rem"),
            _field("Frequency (GHz)", dcc.Input(id="safe-f", value=10.0, **num), width="9rem"),
            _field("Aperture (m; empty: from the gain)", dcc.Input(id="safe-a", value=None, min=0.001, **num),
                   width="15rem"),
            _field("Person exposed", dcc.RadioItems(id="safe-pop", inline=True, value="general public",
                                                    options=["general public", "occupational"]), width="20rem"),
        ]),
        html.Div(id="safe-out", className="summary"),
        _graph("fig-safety"),
    ])


def build_layout(runs_options, run_value) -> html.Div:
    from .bistatic_view import bistatic_view
    from .images import images_view

    builders = {"images": images_view, "bistatic": bistatic_view, "campaign": campaign_view, "gate": gate_view, "rcs": rcs_view, "reduction": reduction_view,
                "revisions": revisions_view, "safety": safety_view}
    return html.Div(className="page", children=[
        header(runs_options, run_value),
        caution_banner(),
        html.Div("No processing run in this store yet: run `cloakrcs process MANIFEST`, or add a campaign zip "
                 "above.", id="empty-banner", className="empty", style=None if not runs_options else {"display": "none"}),
        dcc.Tabs(id="tabs", value="campaign", className="tabs",
                 children=[dcc.Tab(label=label, value=key, children=builders[key]()) for key, label in VIEWS]),
        dcc.Store(id="gate-job"), dcc.Store(id="upload-job"),
        dcc.Interval(id="gate-interval", interval=400, disabled=True),
        dcc.Interval(id="upload-interval", interval=500, disabled=True),
    ])
