"""Shared fixtures: an in-process app and its test client."""
import os

# One BLAS thread, as each gunicorn worker runs (gunicorn.conf.py): with two threads on a busy
# two-CPU machine small least-squares solves (bidder groups) run ten times slower.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import pytest  # noqa: E402

from service import create_app  # noqa: E402


@pytest.fixture(scope="session")
def app():
    return create_app({"TESTING": True})


@pytest.fixture()
def client(app):
    return app.test_client()
