"""The Bistatic view: receiver-arm results of a run (bistatic pattern bare vs cloaked, polar; the
reduction against bistatic angle; the extinction cross-section against frequency with its budget).

Everything shown is computed by cloakrcs.bistatic when the run was processed (its JSON summary);
figures come from cloakrcs.bistatic_report. Logic lives in :class:`BistaticViews` (testable
without a browser).
"""

from __future__ import annotations

from dash import Input, Output, html

from .. import bistatic_report as BR


def arm_summary(result) -> dict | None:
    """The run's receiver-arm summary: from a freshly processed result (``result.arm``) or a stored
    run (its settings' ``bistatic`` entry); None when the run has no receiver-arm targets."""
    arm = getattr(result, "arm", None)
    if arm is not None:
        return arm.summary
    return (getattr(result, "settings", None) or {}).get("bistatic")


def bistatic_view() -> html.Div:
    from .layout import _field, _graph, _pol_radio

    return html.Div(className="view", children=[
        html.P("Receiver-arm (bistatic) sweeps: the transmit antenna stays, the receive antenna moves round the "
               "target; 0 deg is monostatic, 180 deg forward. A cloak that only sends its echo elsewhere shows "
               "here as a negative reduction at some bistatic angle.", className="hint"),
        html.Div(className="controls", children=[_field("Polarization", _pol_radio("bi-pol"), width="9rem")]),
        html.Div(id="bi-status", className="status"),
        html.Div(className="row", children=[html.Div(_graph("fig-bi-polar"), className="col"),
                                            html.Div(_graph("fig-bi-reduction"), className="col")]),
        _graph("fig-bi-extinction"),
        html.H3("Extinction and its uncertainty budget"),
        html.Div(id="bi-extinction-table"),
    ])


class BistaticViews:
    """The Bistatic view's logic over a :class:`cloakrcs.dashboard.callbacks.Views`."""

    def __init__(self, views):
        self.views = views

    def controls(self, run_id):
        summary = arm_summary(self.views.result(run_id))
        pols = BR.polarizations(summary) if summary else []
        return [{"label": p, "value": p} for p in pols], ("VV" if "VV" in pols else (pols[0] if pols else None))

    def figures(self, run_id, pol):
        """(polar pattern, reduction vs bistatic angle, extinction, status line, extinction table)."""
        from .plots import message_figure

        summary = arm_summary(self.views.result(run_id))
        if not summary or pol is None:
            text = "This run has no receiver-arm (bistatic) targets."
            blank = message_figure(text)
            return blank, blank, blank, text, None
        betas = sorted({b for p in summary.get("patterns", []) if p["polarization"] == pol
                        for b in p["bistatic_deg"]})
        status = f"{pol}: bistatic angles shown {BR._angles_text(betas) if betas else 'none'}"
        warnings = [w for w in summary.get("warnings", []) if isinstance(w, str)]
        rows = [e for e in summary.get("extinction_reduction", [])
                if isinstance(e, dict) and e.get("polarization") == pol]
        table = _extinction_table(rows) if rows else None
        return (BR.fig_bistatic_polar(summary, pol), BR.fig_reduction_vs_bistatic(summary, pol),
                BR.fig_extinction(summary, pol), " | ".join([status, *warnings]), table)


def _extinction_table(rows: list[dict]) -> html.Table:
    keys = [k for k in rows[0] if not isinstance(rows[0][k], (list, dict))]
    return html.Table(className="table", children=[
        html.Thead(html.Tr([html.Th(k) for k in keys])),
        html.Tbody([html.Tr([html.Td(f"{r[k]:.4g}" if isinstance(r.get(k), float) else str(r.get(k)))
                             for k in keys]) for r in rows])])


def register_bistatic(app, views) -> BistaticViews:
    bv = BistaticViews(views)

    @app.callback(Output("bi-pol", "options"), Output("bi-pol", "value"), Input("run", "value"))
    def _bi_controls(run_id):
        return bv.controls(run_id)

    @app.callback(Output("fig-bi-polar", "figure"), Output("fig-bi-reduction", "figure"),
                  Output("fig-bi-extinction", "figure"), Output("bi-status", "children"),
                  Output("bi-extinction-table", "children"), Input("run", "value"), Input("bi-pol", "value"))
    def _bi(run_id, pol):
        return bv.figures(run_id, pol)

    return bv
