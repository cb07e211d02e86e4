"""Drives a running headless LibreOffice Calc through UNO against a live bidstats and checks
that what the cells show equals what the JSON API answers for the same inputs.

Runs under Debian's /usr/bin/python3 (the only Python with the uno module); stdlib and uno
only. spreadsheet/run.py starts the service and the office and runs this file:

    /usr/bin/python3 spreadsheet/calc_driver.py --service URL --office-port P --workdir DIR [--survey]

Every check is made once per office locale (en-US, de-DE). Cells fetch with WEBSERVICE()
and sheet links, the references come from the JSON API over urllib. --survey prints what
each cell shows, with no checks, so that two builds of the service can be compared.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time
import traceback
import urllib.error
import urllib.parse
import urllib.request

import uno
from com.sun.star.beans import PropertyValue
from com.sun.star.connection import NoConnectException
from com.sun.star.sheet.SheetLinkMode import NORMAL as LINK_NORMAL

LOCALES = {"en-US": {"decimal": ".", "csv_separator": 44, "language": 1033},
           "de-DE": {"decimal": ",", "csv_separator": 59, "language": 1031}}
REL = 1e-12
CSV_FILTER = "Text - txt - csv (StarCalc)"
FORMULA_RESULT = {1: "VALUE", 2: "STRING", 4: "ERROR"}  # com.sun.star.sheet.FormulaResult

# Invented inputs (the checks compare the cells with the JSON API, never with fixed numbers).
QUOTES = (
    {"metric": "expected_revenue", "rule": "first_price", "bidders": 6, "reserve": 45000,
     "family": "lognormal", "median": 62000, "sigma": 0.35},
    {"metric": "expected_payment", "direction": "reverse", "rule": "second_price", "bidders": 5,
     "family": "gamma", "shape": 30, "scale": 5200},
    {"metric": "probability_of_sale", "rule": "second_price", "bidders": 3, "reserve": 42000.5,
     "family": "beta", "alpha": 2.5, "beta": 3.5, "low": 10000, "high": 90000},
    # 7/8 exactly: three digits after the mark, which a comma locale's VALUE() reads as a
    # thousands group (875) when the answer comes with a point.
    {"metric": "mean_highest", "bidders": 7, "family": "uniform", "low": 0, "high": 1},
    # bidder groups, flat: a local group with a 5% preference against a national one
    {"metric": "expected_payment", "direction": "reverse", "rule": "first_price", "reserve": 125.5,
     "group1_name": "local", "group1_count": 3, "group1_family": "uniform", "group1_low": 80, "group1_high": 140,
     "group1_preference": 0.05, "group2_name": "national", "group2_count": 2, "group2_family": "uniform",
     "group2_low": 70, "group2_high": 130},
)
#: The quote whose inputs sit in cells; the URL is concatenated from them.
FROM_CELLS = {"metric": "expected_revenue", "rule": "first_price", "family": "lognormal",
              "median": 62000, "sigma": 0.35, "bidders": 6, "reserve": 45000.5}
BAD_SIGMA = {**QUOTES[0], "sigma": -1}
SWEEP = {"family": "lognormal", "median": 62000, "sigma": 0.35, "bidders": [2, 6], "reserves": [40000, 45000.5],
         "rules": ["first_price", "second_price"], "metrics": ["expected_revenue", "revenue_sd", "probability_of_sale"]}


# ------------------------------------------------------------------ the service
class Service:
    """The reference side: URLs for the cells, and the JSON API's answers over urllib."""

    def __init__(self, base):
        self.base = base.rstrip("/")

    def url(self, path, params, decimal=".", **extra):
        """A GET URL with every number written in ``decimal``'s mark (lists joined as the door reads them)."""
        items = []
        for key, value in {**params, **extra}.items():
            if isinstance(value, (list, tuple)):
                value = (";" if decimal == "," else ",").join(number_text(v, decimal) for v in value)
            items.append(f"{key}={number_text(value, decimal)}")
        if decimal != ".":
            items.append(f"decimal={decimal}")
        return f"{self.base}{path}?" + "&".join(items)

    def _open(self, request):
        with urllib.request.urlopen(request, timeout=60) as resp:
            return resp.status, resp.read()

    def quote_json(self, url):
        """The JSON API's value for exactly this quote URL."""
        _, body = self._open(urllib.request.Request(url, headers={"Accept": "application/json"}))
        return json.loads(body)["value"]

    def sweep_json(self, sweep):
        """POST /v1/sweeps for the same sweep: its rows."""
        body = {"bidder_values": {k: sweep[k] for k in ("family", "median", "sigma")},
                **{k: sweep[k] for k in ("bidders", "reserves", "rules", "metrics")}}
        req = urllib.request.Request(self.base + "/v1/sweeps", data=json.dumps(body).encode(),
                                     headers={"Content-Type": "application/json", "Accept": "application/json"})
        return json.loads(self._open(req)[1])

    def get(self, path):
        try:
            return self._open(urllib.request.Request(self.base + path))
        except urllib.error.HTTPError as err:
            return err.code, err.read()


def number_text(value, decimal):
    if isinstance(value, float):
        return repr(value).replace(".", decimal)
    return str(value)


# ------------------------------------------------------------------ the office
def prop(name, value):
    p = PropertyValue()
    p.Name, p.Value = name, value
    return p


class Office:
    """The office process behind the UNO bridge: its settings and new or loaded documents."""

    def __init__(self, port, timeout=60):
        local = uno.getComponentContext()
        resolver = local.ServiceManager.createInstanceWithContext("com.sun.star.bridge.UnoUrlResolver", local)
        deadline = time.monotonic() + timeout
        while True:
            try:
                self.ctx = resolver.resolve(f"uno:socket,host=127.0.0.1,port={port};urp;StarOffice.ComponentContext")
                break
            except NoConnectException:
                if time.monotonic() > deadline:
                    raise
                time.sleep(0.5)
        self.smgr = self.ctx.ServiceManager
        self.desktop = self.smgr.createInstanceWithContext("com.sun.star.frame.Desktop", self.ctx)
        self._config = self.smgr.createInstanceWithContext("com.sun.star.configuration.ConfigurationProvider", self.ctx)

    def configure(self, path, **values):
        node = self._config.createInstanceWithArguments("com.sun.star.configuration.ConfigurationUpdateAccess",
                                                        (prop("nodepath", path),))
        for name, value in values.items():
            setattr(node, name, value)
        node.commitChanges()

    def prepare(self, trusted_dir):
        """Settings of the throwaway profile: no proxy for the loopback service; and, for saved
        documents (those built here need neither), update links on opening "always" and a
        trusted folder: without both, a saved WEBSERVICE cell stays Err:540."""
        self.configure("/org.openoffice.Inet/Settings", ooInetProxyType=0)
        self.configure("/org.openoffice.Office.Calc/Content/Update", Link=0)
        self.configure("/org.openoffice.Office.Common/Security/Scripting", SecureURL=(uno.systemPathToFileUrl(trusted_dir),))

    def set_locale(self, tag):
        """The office's locale setting (Tools > Options > Language Settings > Languages), which
        VALUE() and number-to-text conversion follow; a cell's or document's CharLocale does not."""
        self.configure("/org.openoffice.Setup/L10N", ooSetupSystemLocale=tag)

    def new_document(self):
        return self.desktop.loadComponentFromURL("private:factory/scalc", "_blank", 0, (prop("Hidden", True),))

    def open_document(self, path):
        """A saved document, opened as the desktop opens one: its links updated as the settings say
        (a load through the API defaults to never updating them)."""
        mode = uno.getConstantByName("com.sun.star.document.UpdateDocMode.ACCORDING_TO_CONFIG")
        return self.desktop.loadComponentFromURL(uno.systemPathToFileUrl(path), "_blank", 0,
                                                 (prop("Hidden", True), prop("UpdateDocMode", mode)))

    def terminate(self):
        try:
            self.desktop.terminate()
        except Exception:  # the bridge goes down with the office, sometimes before the call returns
            pass


class Shown:
    """What one cell shows: its formula, the type of its content or result, text, value, error code."""

    def __init__(self, sheet, address):
        cell = sheet.getCellRangeByName(address)
        self.address, self.formula = address, cell.getFormula()
        kind = cell.getType().value
        self.kind = FORMULA_RESULT.get(cell.FormulaResultType2, "?") if kind == "FORMULA" else kind
        self.string, self.value, self.error = cell.getString(), cell.getValue(), cell.getError()

    def row(self, expected=""):
        formula = self.formula if len(self.formula) <= 110 else self.formula[:107] + "..."
        return f"  {self.address:<5} {self.kind:<6} {self.string[:40]!r:<42} {self.value!r:<22} {self.error:<4} {expected!s:<22} {formula}"


HEADER = f"  {'cell':<5} {'type':<6} {'shown':<42} {'value':<22} {'err':<4} {'expected':<22} formula"


class Starts(str):
    """An expected text that the cell's text must start with (a plain str must match whole)."""


def close_to(got, want):
    return want is not None and math.isclose(got, want, rel_tol=REL, abs_tol=0.0 if want else 1e-300)


# ------------------------------------------------------------------ checks
class Results:
    """Named checks, each with the cells it looked at; failures print every such cell."""

    def __init__(self):
        self.passed, self.failed, self.exact, self.numbers = 0, 0, 0, 0

    def check(self, name, cells_and_wants, ok=None, note=""):
        """``cells_and_wants``: (Shown, expected) pairs; expected a number means VALUE equal
        to it within REL, True or False a logical result, a string that text (Starts: text starting
        with it), None an error code."""
        problems = []
        for shown, want in cells_and_wants:
            if isinstance(want, bool):
                if shown.kind != "VALUE" or shown.value != float(want):
                    problems.append(shown.address)
            elif isinstance(want, (int, float)):
                self.numbers += 1
                if shown.kind != "VALUE" or shown.error or not close_to(shown.value, want):
                    problems.append(shown.address)
                elif shown.value == want:
                    self.exact += 1
            elif isinstance(want, str):
                text_ok = shown.string.startswith(want) if isinstance(want, Starts) else shown.string == want
                if shown.kind not in ("STRING", "TEXT") or not text_ok:
                    problems.append(shown.address)
            elif want is None and shown.error == 0:
                problems.append(shown.address)
        good = not problems and (ok is None or ok)
        print(f"{'PASS' if good else 'FAIL'}  {name}" + (f"  ({note})" if note else ""), flush=True)
        if not good:
            self.failed += 1
            print(f"  cells that differ: {', '.join(problems) or '(see note)'}")
            if cells_and_wants:
                print(HEADER)
            for shown, want in cells_and_wants:
                print(shown.row("error code" if want is None else want))
        else:
            self.passed += 1


def fill(sheet, formulas):
    """{address: formula or number or text}: formulas and numbers as the API takes them."""
    for address, content in formulas.items():
        cell = sheet.getCellRangeByName(address)
        if isinstance(content, str) and content.startswith("="):
            cell.setFormula(content)
        elif isinstance(content, str):
            cell.setString(content)
        else:
            cell.setValue(content)


def quoted(url):
    return '"' + url.replace('"', '""') + '"'


def locale_in_force(doc, decimal):
    """The decimal mark that the sheet itself writes (one half as text), as a precondition."""
    sheet = doc.Sheets.getByIndex(0)
    fill(sheet, {"Z1": "=MID(1/2;2;1)"})
    doc.calculateAll()
    mark = sheet.getCellRangeByName("Z1").getString()
    if mark != decimal:
        raise RuntimeError(f"the office locale did not take effect: MID(1/2;2;1) gives {mark!r}, not {decimal!r}")


def quote_checks(res, svc, doc, tag, decimal):
    """The quotes as VALUE(WEBSERVICE()) in the locale's decimal mark and as
    NUMBERVALUE(WEBSERVICE(); "."), ISNUMBER beside each, and a SUM over the first three."""
    sheet = doc.Sheets.getByIndex(0)
    wants = [svc.quote_json(svc.url("/v1/quote", q)) for q in QUOTES]
    rows = range(1, len(QUOTES) + 1)
    cells = {}
    for i, q in zip(rows, QUOTES):
        local = svc.url("/v1/quote", q, decimal)
        cells[f"B{i}"] = f"=VALUE(WEBSERVICE({quoted(local)}))"
        cells[f"C{i}"] = f"=NUMBERVALUE(WEBSERVICE({quoted(svc.url('/v1/quote', q))});\".\")"
        cells[f"D{i}"], cells[f"E{i}"] = f"=ISNUMBER(B{i})", f"=ISNUMBER(C{i})"
    total = len(QUOTES) + 2
    cells.update({f"B{total}": "=SUM(B1:B3)", f"C{total}": "=SUM(C1:C3)"})
    fill(sheet, cells)
    doc.calculateAll()
    form = "VALUE(WEBSERVICE(url))" if decimal == "." else 'VALUE(WEBSERVICE(url & "&decimal=,"))'
    for col, flag, name in (("B", "D", form), ("C", "E", 'NUMBERVALUE(WEBSERVICE(url); ".")')):
        isnumber = [Shown(sheet, f"{flag}{i}") for i in rows]
        res.check(f"[{tag}] {name}: {len(QUOTES)} quotes equal the JSON API's values, ISNUMBER true",
                  list(zip([Shown(sheet, f"{col}{i}") for i in rows], wants)) + [(s, True) for s in isnumber])
        res.check(f"[{tag}] SUM over three {col} cells equals the sum of their JSON values",
                  [(Shown(sheet, f"{col}{total}"), math.fsum(wants[:3]))])


def cells_url_check(res, svc, doc, tag, decimal):
    """A URL concatenated from input cells (numbers, as typed), in the sheet's own decimal mark."""
    doc.Sheets.insertNewByName("inputs", 1)
    sheet = doc.Sheets.getByName("inputs")
    names = [k for k in FROM_CELLS if k not in ("metric", "rule")]
    fill(sheet, {f"A{i}": k for i, k in enumerate(names, start=1)})
    fill(sheet, {f"B{i}": FROM_CELLS[k] for i, k in enumerate(names, start=1)})
    head = f"{svc.base}/v1/quote?metric={FROM_CELLS['metric']}&rule={FROM_CELLS['rule']}"
    parts = [quoted(head)] + [f'"&{k}="&B{i}' for i, k in enumerate(names, start=1)]
    if decimal != ".":
        parts.append(quoted(f"&decimal={decimal}"))
    fill(sheet, {"D1": f"=VALUE(WEBSERVICE({'&'.join(parts)}))"})
    doc.calculateAll()
    want = svc.quote_json(svc.url("/v1/quote", FROM_CELLS))
    inputs = [Shown(sheet, f"B{i}") for i in range(1, len(names) + 1)]
    res.check(f"[{tag}] a URL built from input cells gives the JSON API's value",
              [(Shown(sheet, "D1"), want)] + [(s, FROM_CELLS[k]) for s, k in zip(inputs, names)])


def error_checks(res, svc, doc, tag, decimal):
    """A bad sigma: with errors=inline the cell shows the line; without it the cell is an error."""
    sheet = doc.Sheets.getByIndex(0)
    bad = svc.url("/v1/quote", BAD_SIGMA, decimal)
    fill(sheet, {"G1": f"=WEBSERVICE({quoted(bad + '&errors=inline')})", "G2": f"=WEBSERVICE({quoted(bad)})",
                 "G3": f"=VALUE(WEBSERVICE({quoted(bad)}))"})
    doc.calculateAll()
    res.check(f"[{tag}] errors=inline: the cell shows the line naming sigma", [(Shown(sheet, "G1"), Starts("error: sigma"))])
    res.check(f"[{tag}] without errors=inline the 422 makes the cell an error",
              [(Shown(sheet, "G2"), None), (Shown(sheet, "G3"), None)])


def link_csv(doc, name, url, separator, language):
    """Insert sheet ``name`` linked to the CSV at ``url``, read by Calc's CSV filter with the
    given field separator (an ASCII code) and language (an LCID, whose decimal mark applies)."""
    doc.Sheets.insertNewByName(name, doc.Sheets.getCount())
    sheet = doc.Sheets.getByName(name)
    # Filter options: separator, text delimiter ("), UTF-8 (76), from line 1, standard column
    # formats, language, quoted fields as text: no, detect special numbers: yes.
    sheet.link(url, "", CSV_FILTER, f"{separator},34,76,1,,{language},false,true", LINK_NORMAL)
    doc.calculateAll()
    cursor = sheet.createCursor()
    cursor.gotoEndOfUsedArea(False)
    return sheet, cursor.RangeAddress.EndRow + 1, cursor.RangeAddress.EndColumn + 1


def column_name(col):
    return chr(ord("A") + col)


def csv_check(res, svc, doc, tag, decimal, separator, language):
    """GET /v1/sweeps.csv linked as a sheet: every numeric cell a VALUE equal to POST /v1/sweeps."""
    params = {k: v for k, v in SWEEP.items() if k not in ("rules", "metrics")}
    url = svc.url("/v1/sweeps.csv", params, decimal, rules=",".join(SWEEP["rules"]), metrics=",".join(SWEEP["metrics"]))
    table = svc.sweep_json(SWEEP)
    sheet, nrows, ncols = link_csv(doc, "sweep", url, separator, language)
    pairs = [(Shown(sheet, f"{column_name(c)}1"), name) for c, name in enumerate(table["columns"])]
    for r, row in enumerate(table["rows"], start=2):
        pairs += [(Shown(sheet, f"{column_name(c)}{r}"), want) for c, want in enumerate(row)]
    shape_ok = (nrows, ncols) == (len(table["rows"]) + 1, len(table["columns"]))
    res.check(f"[{tag}] sweeps.csv linked as a sheet: every number equals POST /v1/sweeps", pairs, ok=shape_ok,
              note=f"{nrows} x {ncols} cells, the JSON table {len(table['rows']) + 1} x {len(table['columns'])}")


def workbook_check(res, svc, office, workdir, tag):
    """GET /v1/workbook.ods saved and opened: each figure equals the JSON answer for the URL its
    formula builds (evaluated by Calc in a spare cell), a URL that must carry the input cells' values."""
    name = f"[{tag}] the workbook opens and its figures equal the JSON API's"
    status, body = svc.get("/v1/workbook.ods")
    if status != 200:
        res.check(name, [], ok=False, note=f"GET /v1/workbook.ods answered {status}")
        return
    path = os.path.join(workdir, f"bidstats-quotes-{tag}.ods")
    with open(path, "wb") as f:
        f.write(body)
    doc = office.open_document(path)
    try:
        sheet = doc.Sheets.getByIndex(0)
        cursor = sheet.createCursor()
        cursor.gotoEndOfUsedArea(False)
        last_row, spare = cursor.RangeAddress.EndRow + 1, column_name(cursor.RangeAddress.EndColumn + 2)
        inputs = {}  # label in column A: the value in column B, for the rows above the figures
        pairs, problems = [], []
        prefix, suffix = "=VALUE(WEBSERVICE(", "))"
        for row in range(1, last_row + 1):
            shown = Shown(sheet, f"B{row}")
            if not (shown.formula.startswith(prefix) and shown.formula.endswith(suffix)):
                label = sheet.getCellRangeByName(f"A{row}").getString()
                inputs[label] = shown.string if shown.kind == "TEXT" else shown.value
                continue
            sheet.getCellRangeByName(f"{spare}{row}").setFormula("=" + shown.formula[len(prefix):-len(suffix)])
            doc.calculateAll()
            url = sheet.getCellRangeByName(f"{spare}{row}").getString()
            query = dict(urllib.parse.parse_qsl(urllib.parse.urlsplit(url).query))
            mark = query.get("decimal", ".")
            for key, text in query.items():
                if key in inputs and text != number_text(inputs[key], mark).removesuffix(f"{mark}0"):
                    problems.append(f"row {row}: {key}={text} in the URL, {inputs[key]!r} in the cell")
            try:
                pairs.append((Shown(sheet, f"B{row}"), svc.quote_json(url)))
            except urllib.error.HTTPError as err:
                problems.append(f"row {row}: the JSON API answered {err.code} for {url}")
        res.check(name, pairs, ok=bool(pairs) and not problems,
                  note="; ".join(problems) or f"{len(pairs)} formula cells")
    finally:
        doc.close(True)


def run_checks(svc, office, workdir):
    res = Results()
    for tag, loc in LOCALES.items():
        office.set_locale(tag)
        doc = office.new_document()
        try:
            locale_in_force(doc, loc["decimal"])
            quote_checks(res, svc, doc, tag, loc["decimal"])
            cells_url_check(res, svc, doc, tag, loc["decimal"])
            error_checks(res, svc, doc, tag, loc["decimal"])
            csv_check(res, svc, doc, tag, loc["decimal"], loc["csv_separator"], loc["language"])
        finally:
            doc.close(True)
        workbook_check(res, svc, office, workdir, tag)
    print(f"({res.exact} of the {res.numbers} numbers compared were bit for bit the JSON API's)")
    print(f"spreadsheet: {res.passed} passed, {res.failed} failed", flush=True)
    return res.failed == 0


# ------------------------------------------------------------------ survey
def survey(svc, office):
    """What each cell shows, in each locale, for the forms a spreadsheet user would try first."""
    q = QUOTES[0]
    plain, comma = svc.url("/v1/quote", q), svc.url("/v1/quote", q, ",")
    bad = svc.url("/v1/quote", BAD_SIGMA)
    try:
        want = svc.quote_json(plain)
    except urllib.error.HTTPError as err:
        want = f"HTTP {err.code}"
    names = [k for k in FROM_CELLS if k not in ("metric", "rule")]
    head = f"{svc.base}/v1/quote?metric={FROM_CELLS['metric']}&rule={FROM_CELLS['rule']}"
    built = "&".join([quoted(head)] + [f'"&{k}="&I{i}' for i, k in enumerate(names, start=1)])
    try:
        cells_want = svc.quote_json(svc.url("/v1/quote", FROM_CELLS))
    except urllib.error.HTTPError as err:
        cells_want = f"HTTP {err.code}"
    three = {"metric": "mean_highest", "bidders": 7, "family": "uniform", "low": 0, "high": 1}  # 7/8, three decimals
    rows = {  # address: (label, formula, the JSON API's value for its inputs)
        "A1": ("WEBSERVICE(url)", f"=WEBSERVICE({quoted(plain)})", want),
        "A2": ("VALUE(WEBSERVICE(url))", f"=VALUE(WEBSERVICE({quoted(plain)}))", want),
        "A3": ('NUMBERVALUE(WEBSERVICE(url); ".")', f'=NUMBERVALUE(WEBSERVICE({quoted(plain)});".")', want),
        "A4": ("VALUE(WEBSERVICE(url, decimal=,))", f"=VALUE(WEBSERVICE({quoted(comma)}))", want),
        "A5": ("VALUE(WEBSERVICE(url from cells))", f"=VALUE(WEBSERVICE({built}))", cells_want),
        "A6": ("... from cells & decimal=,", f'=VALUE(WEBSERVICE({built}&"&decimal=,"))', cells_want),
        "A7": ("WEBSERVICE(sigma=-1)", f"=WEBSERVICE({quoted(bad)})", ""),
        "A8": ("WEBSERVICE(sigma=-1, errors=inline)", f"=WEBSERVICE({quoted(bad + '&errors=inline')})", ""),
        "A9": ("VALUE(WEBSERVICE(7/8 as text))", f"=VALUE(WEBSERVICE({quoted(svc.url('/v1/quote', three))}))",
               svc.quote_json(svc.url("/v1/quote", three))),
    }
    params = {k: v for k, v in SWEEP.items() if k not in ("rules", "metrics")}
    extra = {"rules": ",".join(SWEEP["rules"]), "metrics": ",".join(SWEEP["metrics"])}
    for tag, loc in LOCALES.items():
        office.set_locale(tag)
        doc = office.new_document()
        try:
            sheet = doc.Sheets.getByIndex(0)
            fill(sheet, {f"I{i}": FROM_CELLS[k] for i, k in enumerate(names, start=1)})
            fill(sheet, {a: f for a, (_, f, _) in rows.items()})
            doc.calculateAll()
            print(f"\n[{tag}] quote cells\n  {'form':<36}{HEADER.strip()}")
            for address, (label, _, expected) in rows.items():
                print(f"  {label:<36}" + Shown(sheet, address).row(expected).strip())
            for name, decimal, sep in (("csv-dot", ".", 44), ("csv-comma", ",", 59)):
                url = svc.url("/v1/sweeps.csv", params, decimal, **extra)
                linked, nrows, ncols = link_csv(doc, name, url, sep, loc["language"])
                shown_rows = [2] if nrows > 3 else range(1, nrows + 1)  # a refused link leaves a short notice
                print(f"[{tag}] sweeps.csv with decimal={decimal}, read with separator {chr(sep)!r} and the "
                      f"locale's language: {nrows} x {ncols} cells; row {', '.join(map(str, shown_rows))}:")
                for r in shown_rows:
                    for c in range(max(ncols, 1)):
                        print("  " + Shown(linked, f"{column_name(c)}{r}").row().strip())
        finally:
            doc.close(True)
    return True


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--service", required=True)
    parser.add_argument("--office-port", type=int, required=True)
    parser.add_argument("--workdir", required=True, help="a folder for saved documents, made a trusted location")
    parser.add_argument("--survey", action="store_true")
    args = parser.parse_args()
    office = Office(args.office_port)
    try:
        office.prepare(args.workdir)
        svc = Service(args.service)
        ok = survey(svc, office) if args.survey else run_checks(svc, office, args.workdir)
    except Exception:
        traceback.print_exc()
        print("spreadsheet: the driver stopped on the error above")
        ok = False
    finally:
        office.terminate()
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
