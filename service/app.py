"""The app factory: wires the resources, the error handlers and the settings."""
from __future__ import annotations

import os

from flask import Flask

from . import settings
from .web import access, admission, auctions, batch, charts, fits, meta, ops, page, problems, quote, sweeps, top_values, workbook


class BidStats(Flask):
    """Flask with every view run inside one admission scope: the request's time
    budget (its computation and its JSON encoding), answer-size tally and heavy slot."""

    def dispatch_request(self):
        with admission.request_scope(self.extensions["bidstats.slots"]):
            return super().dispatch_request()


def create_app(config=None):
    """Build the WSGI app; ``config`` updates Flask's config, and sets any cap by its
    variable's name (``{"BIDSTATS_MAX_BIDDERS": 100}``) over the environment's."""
    app = BidStats(__name__)
    caps = settings.Caps.from_settings(config=config)
    app.extensions["bidstats.caps"] = caps
    app.config["MAX_CONTENT_LENGTH"] = caps.body_bytes
    app.json.sort_keys = False
    if config:
        app.config.update(config)
    app.extensions["bidstats.slots"] = admission.Slots(caps.heavy_slots, os.environ.get("BIDSTATS_SLOT_DIR"))
    problems.register(app)
    for module in (meta, top_values, auctions, fits, batch, quote, sweeps, workbook, charts, page):
        app.register_blueprint(module.bp)
    ops.register(app)
    access.register(app)
    return app
