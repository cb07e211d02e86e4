"""GET /v1/workbook.ods: a small OpenDocument spreadsheet whose cells hold a quote's inputs
and the formulas that fetch its figures from this service, built from the template below.

The formulas build each URL from the input cells and ask for the answer in the sheet's own
decimal mark: MID(1/2; 2; 1) is the character between the 0 and the 5 of one half written
as text, that is the locale's decimal mark, and it goes to the service as ``decimal``, which
then reads the concatenated numbers in it and writes the answer in it; VALUE turns the
answer into a number in any locale, with no TEXT or SUBSTITUTE around the inputs."""
from __future__ import annotations

import io
import zipfile
from xml.sax.saxutils import escape, quoteattr

from flask import Blueprint, Response, request

bp = Blueprint("workbook", __name__)
MIME = "application/vnd.oasis.opendocument.spreadsheet"

#: (label, input) rows: the inputs of one quote; column B holds the value.
INPUTS = (
    ("family", "lognormal"),
    ("median", 62000),
    ("sigma", 0.35),
    ("bidders", 6),
    ("reserve", 45000),
    ("seller_value", 30000),
)
#: (label, metric, rule, the inputs the metric takes): one formula row each.
FIGURES = (
    ("Expected revenue, first price", "expected_revenue", "first_price", ("family", "median", "sigma", "bidders", "reserve")),
    ("Expected revenue, second price", "expected_revenue", "second_price", ("family", "median", "sigma", "bidders", "reserve")),
    ("Revenue sd, second price", "revenue_sd", "second_price", ("family", "median", "sigma", "bidders", "reserve")),
    ("Optimal reserve", "optimal_reserve", None, ("family", "median", "sigma", "bidders", "seller_value")),
    ("Mean of the highest value", "mean_highest", None, ("family", "median", "sigma", "bidders")),
)
_ROW_OF = {name: i + 2 for i, (name, _) in enumerate(INPUTS)}  # inputs start on row 2
_DECIMAL = 'MID(1/2;2;1)'


def quote_formula(base, metric, rule, names):
    """The OpenFormula text of one figure: VALUE(WEBSERVICE(url)), the url built from the cells
    (in an OpenDocument file WEBSERVICE is stored under its namespaced name)."""
    url = f'"{base}v1/quote?metric={metric}' + (f"&rule={rule}" if rule else "") + '"'
    parts = [url] + [f'"&{name}="&[.B{_ROW_OF[name]}]' for name in names] + [f'"&decimal="&{_DECIMAL}']
    return f"of:=VALUE(COM.MICROSOFT.WEBSERVICE({'&'.join(parts)}))"


def _cell(value=None, formula=None):
    if formula is not None:
        return f"<table:table-cell table:formula={quoteattr(formula)} office:value-type=\"float\" office:value=\"0\"/>"
    if isinstance(value, (int, float)):
        return f'<table:table-cell office:value-type="float" office:value="{value!r}"><text:p>{value!r}</text:p></table:table-cell>'
    return f'<table:table-cell office:value-type="string"><text:p>{escape(str(value))}</text:p></table:table-cell>'


def _row(*cells):
    return "<table:table-row>" + "".join(cells) + "</table:table-row>"


def content_xml(base):
    """The sheet: a header, the inputs, an empty row, then one figure per row."""
    rows = [_row(_cell("input"), _cell("value"))]
    rows += [_row(_cell(name), _cell(value)) for name, value in INPUTS]
    rows += [_row(), _row(_cell("figure"), _cell("from the service"))]
    rows += [_row(_cell(label), _cell(formula=quote_formula(base, metric, rule, names))) for label, metric, rule, names in FIGURES]
    return ('<?xml version="1.0" encoding="UTF-8"?>'
            '<office:document-content xmlns:office="urn:oasis:names:tc:opendocument:xmlns:office:1.0" '
            'xmlns:table="urn:oasis:names:tc:opendocument:xmlns:table:1.0" '
            'xmlns:text="urn:oasis:names:tc:opendocument:xmlns:text:1.0" '
            'xmlns:of="urn:oasis:names:tc:opendocument:xmlns:of:1.2" office:version="1.2">'
            '<office:body><office:spreadsheet><table:table table:name="quotes">'
            '<table:table-column/><table:table-column/>' + "".join(rows) +
            "</table:table></office:spreadsheet></office:body></office:document-content>")


MANIFEST = ('<?xml version="1.0" encoding="UTF-8"?>'
            '<manifest:manifest xmlns:manifest="urn:oasis:names:tc:opendocument:xmlns:manifest:1.0" manifest:version="1.2">'
            f'<manifest:file-entry manifest:full-path="/" manifest:media-type="{MIME}"/>'
            '<manifest:file-entry manifest:full-path="content.xml" manifest:media-type="text/xml"/>'
            "</manifest:manifest>")


def workbook_bytes(base):
    """The .ods file: the mimetype entry first and uncompressed, as OpenDocument requires."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as z:
        z.writestr(zipfile.ZipInfo("mimetype"), MIME, compress_type=zipfile.ZIP_STORED)
        z.writestr("META-INF/manifest.xml", MANIFEST, compress_type=zipfile.ZIP_DEFLATED)
        z.writestr("content.xml", content_xml(base), compress_type=zipfile.ZIP_DEFLATED)
    return buf.getvalue()


@bp.get("/v1/workbook.ods")
def get_workbook():
    """The workbook, its formulas pointing at this service as the caller reached it."""
    resp = Response(workbook_bytes(request.host_url), mimetype=MIME)
    resp.headers["Content-Disposition"] = 'attachment; filename="bidstats-quotes.ods"'
    return resp
