"""Optional API keys, CORS allow-list, body cap before parsing, security headers.
Behaviour checks of the HTTP layer (RFC 9457 bodies, RFC 6750 bearer tokens);
no numbers are involved."""
import pytest

from service import create_app

BODY = {"bidder_values": {"family": "uniform", "low": 0, "high": 1}, "bidders": 3}


@pytest.fixture()
def keyed():
    return create_app({"API_KEYS": "alpha-key, beta-key", "CORS_ORIGINS": "https://desk.example"}).test_client()


def test_without_keys_everything_is_open(client):
    assert client.post("/v1/top-values", json=BODY).status_code == 200


@pytest.mark.parametrize("headers,status", [
    ({}, 401),
    ({"Authorization": "Bearer alpha-key"}, 200),
    ({"Authorization": "bearer beta-key"}, 200),
    ({"X-API-Key": "beta-key"}, 200),
    ({"X-API-Key": "alpha-ke"}, 401),
    ({"Authorization": "Bearer alpha-key-and-more"}, 401),
    ({"Authorization": "Basic YWxwaGEta2V5"}, 401),
])
def test_keys_are_required_when_set(keyed, headers, status):
    resp = keyed.post("/v1/top-values", json=BODY, headers=headers)
    assert resp.status_code == status
    if status == 401:
        assert resp.mimetype == "application/problem+json"
        assert resp.get_json()["status"] == 401
        assert resp.headers["WWW-Authenticate"].startswith("Bearer")


@pytest.mark.parametrize("path", ["/healthz", "/readyz", "/openapi.yaml"])
def test_open_paths_stay_open(keyed, path):
    assert keyed.get(path).status_code == 200


@pytest.mark.parametrize("path", ["/metrics", "/v1/quote?metric=mean_highest&bidders=3&family=uniform&low=0&high=1",
                                  "/v1/sweeps.csv?family=uniform&low=0&high=1&bidders=2&reserves=0.5"])
def test_other_gets_need_a_key(keyed, path):
    assert keyed.get(path).status_code == 401
    assert keyed.get(path, headers={"X-API-Key": "alpha-key"}).status_code == 200


def test_cors_is_off_by_default(client):
    resp = client.post("/v1/top-values", json=BODY, headers={"Origin": "https://desk.example"})
    assert "Access-Control-Allow-Origin" not in resp.headers


def test_cors_allow_list(keyed):
    ok = keyed.post("/v1/top-values", json=BODY, headers={"Origin": "https://desk.example", "X-API-Key": "alpha-key"})
    assert ok.headers["Access-Control-Allow-Origin"] == "https://desk.example"
    other = keyed.post("/v1/top-values", json=BODY, headers={"Origin": "https://elsewhere.example", "X-API-Key": "alpha-key"})
    assert "Access-Control-Allow-Origin" not in other.headers
    pre = keyed.options("/v1/top-values", headers={"Origin": "https://desk.example", "Access-Control-Request-Method": "POST"})
    assert pre.status_code == 204 and "POST" in pre.headers["Access-Control-Allow-Methods"]
    bad = keyed.options("/v1/top-values", headers={"Origin": "https://elsewhere.example", "Access-Control-Request-Method": "POST"})
    assert bad.status_code == 403


def test_body_over_the_cap_is_refused_before_parsing(client):
    resp = client.post("/v1/top-values", data="{" * 2_000_001, content_type="application/json")
    assert resp.status_code == 413 and resp.mimetype == "application/problem+json"


@pytest.mark.parametrize("path", ["/healthz", "/nowhere"])
def test_security_headers(client, path):
    resp = client.get(path)
    assert resp.headers["X-Content-Type-Options"] == "nosniff"
    assert "default-src 'none'" in resp.headers["Content-Security-Policy"]


def test_nothing_sent_is_evaluated(client):
    # Strings in numeric fields are refused, never evaluated (no eval anywhere in the service).
    body = {"bidder_values": {"family": "uniform", "low": "__import__('os').getpid()", "high": 1}, "bidders": 3}
    resp = client.post("/v1/top-values", json=body)
    assert resp.status_code == 422
    assert resp.get_json()["errors"][0]["field"] == "bidder_values.low"
