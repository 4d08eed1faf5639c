"""The Dash app: ``create_app(store_url) -> dash.Dash`` (a store URL, None for the default store,
or a cloakrcs.dashboard.data source object)."""

from __future__ import annotations

from pathlib import Path

import dash

from .callbacks import Views, register
from .data import make_source
from .layout import build_layout
from .upload import MAX_COMPRESSED_BYTES


def create_app(store_url=None) -> dash.Dash:
    """A dashboard over the results store at ``store_url`` (or over a source object, for tests)."""
    source = make_source(store_url)
    views = Views(source)
    app = dash.Dash(__name__, title="cloakrcs dashboard", assets_folder=str(Path(__file__).parent / "assets"),
                    suppress_callback_exceptions=False, update_title=None)
    # base64 inflates the zip by 4/3; leave room for the form envelope
    app.server.config["MAX_CONTENT_LENGTH"] = int(MAX_COMPRESSED_BYTES * 1.4) + 1024 * 1024

    def layout():
        options = views.run_options()
        return build_layout(options, options[0]["value"] if options else None)

    app.layout = layout
    register(app, views)
    app.views = views  # for tests and benchmarks
    return app
