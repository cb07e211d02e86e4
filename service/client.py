"""A small Python client for the bidstats HTTP service.

It needs only the standard library and ``requests``; it does not import Flask
or the numerics core, so the file can be copied into any project on its own.

    from service.client import BidstatsClient, sweep_records

    bs = BidstatsClient("http://127.0.0.1:8000")
    report = bs.revenue(bidder_values={"family": "lognormal", "median": 62000, "sigma": 0.35},
                        bidders=6, reserve=45000)
    for row in report["results"]:
        print(row["rule"], row["expected_revenue"])

Wherever a body takes ``bidders`` it takes an integer or a distribution over the
count, for example ``bidders={"distribution": "poisson", "mean": 4.5}``; ``quote``
takes the flat form (``bidders_distribution="poisson", bidders_mean=4.5``).

Every method sends one request and returns the parsed JSON answer as plain
dicts and lists (``quote`` returns a float). Any 4xx or 5xx answer raises
:class:`BidstatsError`, which carries the HTTP status and the parsed
``application/problem+json`` body (RFC 9457).
"""
from __future__ import annotations

import json
import os
import time

import requests

__all__ = ["BidstatsClient", "BidstatsError", "sweep_records"]

#: Answers that are retried (with the same back-off as connection errors).
RETRY_STATUSES = frozenset({503})


class BidstatsError(Exception):
    """An error answer from the service, or no answer at all.

    ``status`` is the HTTP status (``None`` when the service could not be
    reached after all retries, or did not answer within the timeout). ``problem`` is the parsed problem+json body: a
    dict with ``type``, ``title``, ``status``, ``detail`` and, for a 422,
    ``errors`` as ``[{"field", "message"}]``. When the body is not JSON (a proxy's
    error page, say), ``problem`` is built from the status line and the first
    characters of the text; when there was no answer it is ``None``.
    """

    def __init__(self, message, status=None, problem=None):
        super().__init__(message)
        self.status = status
        self.problem = problem

    @property
    def errors(self):
        """The offending fields of a 422 as ``[{"field", "message"}]`` (else ``[]``)."""
        return list((self.problem or {}).get("errors") or [])


def _strict_json(text):
    """Parse strict JSON: the service never sends NaN or Infinity."""
    def no_constants(name):
        raise ValueError(f"{name} is not a JSON number")
    return json.loads(text, parse_constant=no_constants)


def sweep_records(answer):
    """The rows of a ``/v1/sweeps`` answer as a list of dicts keyed by column.

    ``pandas.DataFrame(sweep_records(answer))`` and
    ``pandas.DataFrame(answer["rows"], columns=answer["columns"])`` give the same
    table; pandas is not needed for this function.
    """
    columns = list(answer["columns"])
    out = []
    for i, row in enumerate(answer["rows"]):
        if len(row) != len(columns):
            raise ValueError(f"row {i} has {len(row)} values for {len(columns)} columns")
        out.append(dict(zip(columns, row)))
    return out


class BidstatsClient:
    """A client for one bidstats service.

    Parameters
    ----------
    base_url:
        Where the service answers, e.g. ``"http://127.0.0.1:8000"``.
    timeout:
        Seconds to wait for each attempt (connect and read).
    retries:
        How many times to try again after the first attempt fails with a
        connection error or a 503 answer. ``retries=3`` means at most four
        attempts. Any other error answer is raised at once.
    backoff:
        The wait before the first retry, in seconds; it doubles for each further
        retry (0.2, 0.4, 0.8, ...). A 503 with a numeric ``Retry-After`` header
        waits that long instead, if longer (at most 30 seconds).
    api_key:
        When given (or, if not, when the environment variable
        ``BIDSTATS_API_KEY`` is set), every request carries
        ``Authorization: Bearer <key>``. The service checks it when it is started
        with BIDSTATS_API_KEYS (README, "Access"), as a gateway in front of it may.
    session:
        A ``requests.Session`` to send through (for connection pooling, proxies
        or test adapters). The client makes its own when none is given.

    Retrying is safe for every method, POSTs included: every bidstats endpoint
    only computes an answer from the request and changes nothing on the
    server, so sending the same request twice has the same effect as once.
    """

    def __init__(self, base_url="http://127.0.0.1:8000", timeout=10.0, retries=3, backoff=0.2,
                 api_key=None, session=None):
        if retries < 0:
            raise ValueError("retries must be at least 0")
        if backoff < 0:
            raise ValueError("backoff must be at least 0")
        self.base_url = base_url.rstrip("/")
        self.timeout = timeout
        self.retries = int(retries)
        self.backoff = float(backoff)
        self.api_key = api_key if api_key is not None else (os.environ.get("BIDSTATS_API_KEY") or None)
        self._own_session = session is None
        self.session = session if session is not None else requests.Session()
        self._sleep = time.sleep  # replaceable, so tests can record the waits

    # -- plumbing ---------------------------------------------------------------

    def close(self):
        """Close the session if the client made it."""
        if self._own_session:
            self.session.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self):
        return f"BidstatsClient({self.base_url!r})"

    def _headers(self, accept):
        headers = {"Accept": accept}
        if self.api_key:
            headers["Authorization"] = f"Bearer {self.api_key}"
        return headers

    def _wait(self, attempt, response=None):
        delay = self.backoff * (2 ** attempt)
        if response is not None:
            raw = response.headers.get("Retry-After", "")
            try:
                delay = max(delay, min(float(raw), 30.0))
            except ValueError:
                pass
        if delay > 0:
            self._sleep(delay)

    def _send(self, method, path, *, params=None, body=None, accept="application/json"):
        """One call with retries; returns the successful ``requests.Response``."""
        url = self.base_url + path
        kwargs = {"headers": self._headers(accept), "timeout": self.timeout}
        if params is not None:
            kwargs["params"] = params
        if body is not None:
            # Strict JSON out: a NaN or infinity in the request is a caller's bug.
            kwargs["data"] = json.dumps(body, allow_nan=False).encode("utf-8")
            kwargs["headers"]["Content-Type"] = "application/json"
        attempt = 0
        while True:
            try:
                resp = self.session.request(method, url, **kwargs)
            except requests.ConnectionError as exc:
                if attempt >= self.retries:
                    raise BidstatsError(f"{method} {url}: no answer after {attempt + 1} attempt(s): {exc}") from exc
                self._wait(attempt)
                attempt += 1
                continue
            except requests.RequestException as exc:
                # A read timeout (the service took longer than ``timeout``) is not retried:
                # the same request would most likely take as long again.
                raise BidstatsError(f"{method} {url}: {exc}") from exc
            if resp.status_code in RETRY_STATUSES and attempt < self.retries:
                resp.close()
                self._wait(attempt, resp)
                attempt += 1
                continue
            if resp.status_code >= 400:
                raise self._error(method, url, resp)
            return resp

    @staticmethod
    def _error(method, url, resp):
        try:
            problem = _strict_json(resp.text)
            if not isinstance(problem, dict):
                raise ValueError("not an object")
        except ValueError:
            problem = {"type": "about:blank", "title": resp.reason or "Error", "status": resp.status_code,
                       "detail": resp.text[:500]}
        detail = problem.get("detail") or problem.get("title") or ""
        fields = ", ".join(f"{e.get('field')}: {e.get('message')}" for e in problem.get("errors") or [])
        message = f"{method} {url} -> {resp.status_code}: {detail}" + (f" [{fields}]" if fields else "")
        return BidstatsError(message, status=resp.status_code, problem=problem)

    def _json(self, method, path, *, params=None, body=None):
        resp = self._send(method, path, params=params, body=body)
        try:
            return _strict_json(resp.text)
        except ValueError as exc:
            raise BidstatsError(f"{method} {path}: the answer is not JSON: {resp.text[:200]!r}",
                                status=resp.status_code) from exc

    def _post(self, path, body):
        return self._json("POST", path, body=body)

    # -- the endpoints ----------------------------------------------------------

    def health(self):
        """GET /healthz: ``{"status": "ok"}`` when the service is up."""
        return self._json("GET", "/healthz")

    def openapi(self):
        """GET /openapi.yaml: the API description (OpenAPI 3.1) as YAML text."""
        return self._send("GET", "/openapi.yaml", accept="application/yaml").text

    def top_values(self, **body):
        """POST /v1/top-values: means, sds and quantiles of the top ranks.

        Keywords: ``bidder_values``, ``bidders``, and optionally ``ranks``,
        ``quantiles``, ``curve_points``.
        """
        return self._post("/v1/top-values", body)

    def joint_density(self, **body):
        """POST /v1/top-values/joint-density: the joint density of two ranks.

        Keywords: ``bidder_values``, ``bidders``, optionally ``ranks`` and one of
        ``grid_points`` or ``points`` (``[{"higher", "lower"}]``).
        """
        return self._post("/v1/top-values/joint-density", body)

    def revenue(self, **body):
        """POST /v1/revenue: expected revenue (or payment) and its risk per rule.

        Keywords: ``bidder_values`` (a sale) or ``bidder_costs`` (a procurement),
        ``bidders``, optionally ``reserve``, ``rules``, ``quantiles``,
        ``seller_value`` / ``buyer_value``.
        """
        return self._post("/v1/revenue", body)

    @staticmethod
    def _groups_body(groups, body):
        """The groups under ``cost_groups`` when they hold costs, else ``bidder_groups``."""
        key = "cost_groups" if any("bidder_costs" in g for g in groups) else "bidder_groups"
        return {key: list(groups), **body}

    def group_revenue(self, groups, **body):
        """POST /v1/revenue for bidders who differ: ``groups`` a list of ``{name, count,
        bidder_values | bidder_costs, preference}``; optionally ``reserve``, ``rules``,
        ``seller_value`` / ``buyer_value``. Each rule's result carries ``groups``."""
        return self._post("/v1/revenue", self._groups_body(groups, body))

    def group_bids(self, groups, **body):
        """POST /v1/bid-strategy for bidder groups: each group's bids (``rule``, ``at`` or ``points``)."""
        return self._post("/v1/bid-strategy", self._groups_body(groups, body))

    def group_top_values(self, groups, **body):
        """POST /v1/top-values for bidder groups: the highest and second-highest value (lowest
        costs) across the groups, and each group's chance to hold them."""
        return self._post("/v1/top-values", self._groups_body(groups, body))

    def bid_strategy(self, **body):
        """POST /v1/bid-strategy: equilibrium bids for one rule, at ``at`` values or on ``points``."""
        return self._post("/v1/bid-strategy", body)

    def reserve_price(self, **body):
        """POST /v1/reserve-price: the revenue-maximising reserve (or maximum price)."""
        return self._post("/v1/reserve-price", body)

    def fit(self, **body):
        """POST /v1/fits: a value (cost) model recovered from past auctions; ``bidder_values``
        (``bidder_costs``) in the answer pastes into every other call unchanged.
        ``fit(rule="ascending", auctions=[{"bidders": 5, "price": 61200}, ...])``."""
        return self._post("/v1/fits", body)

    def quote(self, **params):
        """GET /v1/quote: one figure as a float.

        Keywords are the query parameters, the value model flattened:
        ``quote(metric="expected_revenue", rule="first_price", bidders=6,
        reserve=45000, family="lognormal", median=62000, sigma=0.35)``.
        Numbers are sent in plain decimal notation.
        """
        query = {k: _query_value(v) for k, v in params.items() if v is not None}
        answer = self._json("GET", "/v1/quote", params=query)
        return float(answer["value"])

    def batch(self, requests):
        """POST /v1/batch: many calls in one; returns ``{"responses": [{id, status, body}]}``.

        ``requests`` is a list of ``{"id", "path", "body"}`` items (or a dict that
        already has a ``requests`` list). A bad item answers with its own status
        and problem body inside the list; this method raises only when the
        envelope itself is refused.
        """
        envelope = requests if isinstance(requests, dict) else {"requests": list(requests)}
        return self._post("/v1/batch", envelope)

    def sweeps(self, **body):
        """POST /v1/sweeps: a grid of bidder counts x reserves x rules.

        Keywords: ``bidder_values`` or ``bidder_costs``; ``bidders`` as a list of
        whole numbers or count distributions, or ``{"from", "to", "step"}``; ``reserves`` as a list or
        ``{"from", "to", "steps"}``; ``rules``; ``metrics``; ``seller_value`` /
        ``buyer_value``. Returns ``{"columns": [...], "rows": [[...], ...]}``; the
        columns start with ``bidders``, ``reserve``, ``rule``, then one per
        metric. :func:`sweep_records` turns it into a list of dicts.
        """
        return self._post("/v1/sweeps", body)

    def sweeps_csv(self, **body):
        """POST /v1/sweeps with ``Accept: text/csv``: the same grid as CSV text with a header row."""
        return self._send("POST", "/v1/sweeps", body=body, accept="text/csv").text


def _query_value(value):
    """A query-string value the service reads as intended (no ``True``, no ``1e+05`` surprises)."""
    if isinstance(value, bool):
        raise TypeError("quote parameters take numbers and words, not booleans")
    if isinstance(value, float):
        return repr(value)
    return str(value)
