"""The app factory: wires the resources, the error handlers and the settings."""
from __future__ import annotations

from flask import Flask

from . import settings
from .web import access, auctions, batch, meta, ops, problems, quote, sweeps, top_values


def create_app(config=None):
    """Build the WSGI app; ``config`` updates Flask's config (tests use it)."""
    app = Flask(__name__)
    app.config["MAX_CONTENT_LENGTH"] = settings.CAPS.body_bytes
    app.json.sort_keys = False
    if config:
        app.config.update(config)
    problems.register(app)
    for module in (meta, top_values, auctions, batch, quote, sweeps):
        app.register_blueprint(module.bp)
    ops.register(app)
    access.register(app)
    return app
