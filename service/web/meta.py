"""Service endpoints: health and the API description."""
from __future__ import annotations

from pathlib import Path

from flask import Blueprint, Response

bp = Blueprint("meta", __name__)
# The repository's openapi.yaml (editable installs), else the one beside the
# working directory (the container copies it to /app).
_CANDIDATES = (Path(__file__).resolve().parents[2] / "openapi.yaml", Path.cwd() / "openapi.yaml")
SPEC_PATH = next((p for p in _CANDIDATES if p.is_file()), _CANDIDATES[0])


@bp.get("/healthz")
def healthz():
    return Response('{"status":"ok"}', mimetype="application/json")


@bp.get("/openapi.yaml")
def openapi():
    return Response(SPEC_PATH.read_bytes(), mimetype="application/yaml")
