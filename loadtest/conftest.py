"""Fixtures for the load and fault tests; the machinery lives in harness.py
(a module of its own name, so that it cannot be mistaken for tests/conftest.py)."""
from harness import gunicorn_factory, wrk  # noqa: F401  (pytest fixtures)
