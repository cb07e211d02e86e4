"""`make browser-test`: the explorer page in a real browser, as a person would use it.

Starts the service (the venv's gunicorn, 2 workers, with an API key required) on a free loopback
port and drives Debian's chromium through Playwright for Python: loads /, types the key, fills the
inputs, waits for the figures and checks them against the JSON API's answers for the same inputs,
checks every chart image loaded, switches to a tender, pastes past auctions and sees a fit, and
checks labels and the keyboard's first stops. Screenshots of each state go to
browser/out/<run time>/; the page's first paint is reported (not asserted).

    .venv/bin/python browser/run.py [--keep-server]

Without chromium (which `make browser-test` installs with apt-get) the run is skipped with a
message and exit status 0.
"""
from __future__ import annotations

import math
import shutil
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import requests

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "loadtest"))
from harness import Gunicorn  # noqa: E402

KEY = "explorer-run-key"
OUT = ROOT / "browser" / "out"
WAIT_MS = 30_000
#: Past auctions for the fit panel: an invented timber-lot series (demo data, not a check value).
PAST = """auction,bidders,price
1,4,61200
2,5,58400
3,3,49900
4,6,66100
5,4,57300
6,5,63800
7,4,52000
8,5,60500
9,6,64900
10,3,51800
"""


class Failed(Exception):
    pass


def chromium():
    return shutil.which("chromium") or shutil.which("chromium-browser")


def check(ok, what):
    if not ok:
        raise Failed(what)
    print(f"browser: ok   {what}")


def close(a, b, rel=1e-12):
    return math.isclose(float(a), float(b), rel_tol=rel, abs_tol=1e-12)


def api(url, path, body):
    r = requests.post(url + path, json=body, headers={"Authorization": f"Bearer {KEY}"}, timeout=30)
    r.raise_for_status()
    return r.json()


def wait_figures(page):
    """Until the page says it is up to date (or not computed), and every chart has settled."""
    page.wait_for_function("() => /^(Up to date|Not computed)/.test(document.getElementById('status').textContent)",
                           timeout=WAIT_MS)
    page.wait_for_function("() => [...document.querySelectorAll('.charts img')].every(i => i.complete && i.naturalWidth > 0)",
                           timeout=WAIT_MS)


def figure(page, name):
    return page.get_attribute(f"#{name}", "data-value")


def fill_form(page, values):
    for selector, value in values.items():
        page.fill(selector, str(value))


def first_visit(page, url):
    """Load /, see the refusal shown before a key is typed, check labels and the Tab order; the
    first contentful paint (or DOM-ready time) in ms."""
    t0 = time.monotonic()
    page.goto(url + "/")
    page.wait_for_function("() => document.getElementById('status').textContent.startsWith('Not computed')", timeout=WAIT_MS)
    paint, ready = page.evaluate("""() => [(performance.getEntriesByName('first-contentful-paint')[0] || {startTime: -1}).startTime,
        performance.getEntriesByType('navigation')[0].domContentLoadedEventEnd]""")
    print(f"browser: first contentful paint {paint:.0f} ms, DOM ready {ready:.0f} ms after navigation (the page's clock; "
          f"-1: not reported by this browser); the first answers shown {1000 * (time.monotonic() - t0):.0f} ms after it")
    check("401" in page.text_content("#status") or "key" in page.text_content("#status").lower(),
          "without the key the page says the service refused: " + page.text_content("#status"))
    unlabelled = page.evaluate("""() => [...document.querySelectorAll('input, select, textarea')]
        .filter(e => !(e.labels && e.labels.length)).map(e => e.id || e.name)""")
    check(unlabelled == [], f"every input has a label (unlabelled: {unlabelled})")
    page.focus("body")
    stops = []
    for _ in range(3):
        page.keyboard.press("Tab")
        stops.append(page.evaluate("() => document.activeElement.id"))
    check(stops == ["direction", "bidders", "reserve"], f"Tab walks the form in reading order ({stops})")
    return paint if paint >= 0 else ready


def sale(page, url, shots):
    """A sale's inputs typed in, with the key: the figures, charts and formula against the JSON API."""
    page.fill("#api-key", KEY)
    page.select_option("#direction", "forward")
    page.select_option("#family", "lognormal")
    fill_form(page, {"#param-median": 62000, "#param-sigma": 0.35, "#bidders": 8, "#reserve": 40000, "#own": 30000})
    page.click("#update")
    wait_figures(page)
    model = {"family": "lognormal", "median": 62000, "sigma": 0.35}
    body = {"bidder_values": model, "bidders": 8, "reserve": 40000, "seller_value": 30000, "rules": ["first_price", "second_price"]}
    revenue = api(url, "/v1/revenue", body)
    for r in revenue["results"]:
        shown = figure(page, f"fig-revenue-{r['rule']}")
        check(shown and close(shown, r["expected_revenue"]), f"{r['rule']} expected revenue {shown} = the API's {r['expected_revenue']}")
    top = api(url, "/v1/top-values", {"bidder_values": model, "bidders": 8})
    check(close(figure(page, "fig-rank1"), top["results"][0]["mean"]), "expected highest value = the API's")
    best = api(url, "/v1/reserve-price", {"bidder_values": model, "bidders": 8, "seller_value": 30000})
    check(close(figure(page, "fig-optimal-reserve"), best["optimal_reserve"]), "optimal reserve = the API's")
    sizes = page.evaluate("() => [...document.querySelectorAll('.charts img')].map(i => [i.id, i.naturalWidth, i.naturalHeight])")
    check(all(w > 0 and h > 0 for _, w, h in sizes) and len(sizes) == 4, f"four charts loaded {sizes}")
    formula = page.evaluate("() => document.getElementById('formula').value")
    check(formula.startswith("=VALUE(WEBSERVICE(") and "metric=expected_revenue" in formula, "the quote formula is shown")
    quote = requests.get(formula.split('"')[1], headers={"Authorization": f"Bearer {KEY}"}, timeout=30)
    check(quote.status_code == 200 and close(quote.text, revenue["results"][0]["expected_revenue"]),
          f"the formula's URL answers the same figure ({quote.text.strip()})")
    page.screenshot(path=str(shots / "sale.png"), full_page=True)


def tender(page, url, shots):
    """The same page switched to a tender: the payment against the JSON API."""
    page.select_option("#direction", "reverse")
    page.select_option("#family", "uniform")
    fill_form(page, {"#param-low": 80, "#param-high": 140, "#bidders": 6, "#reserve": 125, "#own": 150})
    page.click("#update")
    page.wait_for_function("() => document.getElementById('fig-payment-first_price') !== null", timeout=WAIT_MS)
    wait_figures(page)
    costs = {"family": "uniform", "low": 80, "high": 140}
    pay = api(url, "/v1/revenue", {"bidder_costs": costs, "bidders": 6, "reserve": 125, "buyer_value": 150,
                                   "rules": ["first_price", "second_price"]})
    shown = figure(page, "fig-payment-first_price")
    check(close(shown, pay["results"][0]["expected_payment"]), f"tender: first-price expected payment {shown} = the API's")
    page.screenshot(path=str(shots / "tender.png"), full_page=True)


def past_auctions(page, shots):
    """Paste past auctions, see a fit and its chart, and put the fitted model to use."""
    page.select_option("#direction", "forward")
    page.fill("#past-csv", PAST)
    page.select_option("#past-rule", "ascending")
    page.click("#fit")
    page.wait_for_selector("#fit-selected", timeout=WAIT_MS)
    chosen = figure(page, "fit-selected")
    check(bool(chosen), f"a fit is shown (selected: {chosen})")
    page.wait_for_function("() => { const i = document.getElementById('chart-fit'); return i.complete && i.naturalWidth > 0; }",
                           timeout=WAIT_MS)
    check(True, "the fit chart loaded")
    page.click("#use-fit")
    page.wait_for_function("() => document.getElementById('model-json').value.includes('family')", timeout=WAIT_MS)
    wait_figures(page)
    check(page.text_content("#status").startswith("Up to date"), "the fitted model drives the figures")
    page.screenshot(path=str(shots / "fit.png"), full_page=True)


def run(page, url, shots):
    paint = first_visit(page, url)
    sale(page, url, shots)
    tender(page, url, shots)
    past_auctions(page, shots)
    return paint


def main():
    browser_path = chromium()
    if browser_path is None:
        print("browser: SKIPPED: chromium is not installed; `make browser-test` installs it as root with apt-get")
        print("browser: 0 passed, 0 failed, 1 skipped")
        return 0
    from playwright.sync_api import sync_playwright

    shots = OUT / datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    shots.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix="bidstats-browser-"))
    server = Gunicorn(log_path=tmp / "gunicorn.log", env_extra={"BIDSTATS_API_KEYS": KEY}).start()
    started = time.monotonic()
    code = 0
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=browser_path, headless=True, args=["--no-sandbox"])
            page = browser.new_page(viewport={"width": 1360, "height": 900})
            said = []
            page.on("console", lambda m: said.append(f"{m.type}: {m.text}"))
            page.on("pageerror", lambda e: said.append(f"uncaught: {e}"))
            try:
                run(page, server.url, shots)
            except Exception as e:  # what the page showed, then the failure
                code = 1
                print(f"browser: FAILED {type(e).__name__}: {e}")
                try:
                    print("browser: status line: " + page.text_content("#status"))
                    print("browser: figures: " + " | ".join(page.eval_on_selector_all("#headline tr", "rs => rs.map(r => r.innerText)")))
                    page.screenshot(path=str(shots / "failure.png"), full_page=True)
                except Exception:
                    pass
                for line in said[-20:]:
                    print("browser: console " + line)
                print("--- last lines of gunicorn.log\n" + "\n".join(server.log_text().splitlines()[-20:]))
            # refused requests log console errors by design (the first ones, before the key); a
            # script error or a blocked resource (the Content-Security-Policy) is a failure
            errors = [s for s in said if s.startswith("uncaught") or "Content Security Policy" in s]
            if errors and code == 0:
                code = 1
                print("browser: FAILED the page logged errors: " + "; ".join(errors))
            browser.close()
    finally:
        server.stop()
        shutil.rmtree(tmp, ignore_errors=True)
    print(f"browser: screenshots in {shots.relative_to(ROOT)}")
    print(f"browser: {'passed' if code == 0 else 'failed'} in {time.monotonic() - started:.1f} s")
    return code


if __name__ == "__main__":
    sys.exit(main())
