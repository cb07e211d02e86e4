"""GET /: the explorer page (HTML, CSS and JavaScript from this package, nothing fetched from
elsewhere), under a Content-Security-Policy that lets it run its own script and style only."""
from __future__ import annotations

import json
from importlib import resources

from flask import Blueprint, Response, abort

from ..core import models as M

bp = Blueprint("page", __name__)

#: Its own script, style and images (charts arrive as blob: URLs fetched with the page's key; the
#: empty data: icon keeps the browser from asking for /favicon.ico).
PAGE_POLICY = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' blob: data:; connect-src 'self'; "
               "base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
ASSETS = {"explorer.js": "text/javascript", "explorer.css": "text/css"}


def _read(name):
    return resources.files(__package__).joinpath("explorer", name).read_text(encoding="utf-8")


def _families():
    """Each parametric family's parameters, for the page's model form."""
    return {name: list(cls.parameters) for name, cls in sorted(M.PARAMETRIC.items())}


@bp.get("/")
def explorer():
    html = _read("index.html").replace("__FAMILIES__", json.dumps(_families()).replace("<", "\\u003c"))
    resp = Response(html, mimetype="text/html")
    resp.headers["Content-Security-Policy"] = PAGE_POLICY
    return resp


@bp.get("/explorer/<asset>")
def explorer_asset(asset):
    if asset not in ASSETS:
        abort(404)
    resp = Response(_read(asset), mimetype=ASSETS[asset])
    resp.headers["Content-Security-Policy"] = PAGE_POLICY
    return resp
