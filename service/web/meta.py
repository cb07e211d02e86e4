"""Service endpoints: health and the API description."""
from __future__ import annotations

from pathlib import Path

from flask import Blueprint, Response

bp = Blueprint("meta", __name__)
SPEC_PATH = Path(__file__).resolve().parents[2] / "openapi.yaml"


@bp.get("/healthz")
def healthz():
    return Response('{"status":"ok"}', mimetype="application/json")


@bp.get("/openapi.yaml")
def openapi():
    return Response(SPEC_PATH.read_bytes(), mimetype="application/yaml")
