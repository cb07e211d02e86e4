"""Past auctions as CSV, for POST /v1/fits with Content-Type text/csv: one row per bid or per
auction, the other options in the query string.

Headers: ``auction,bidders,bid`` (every bid, a row each), ``auction,bidders,winning_bid``, or
``auction,bidders,price`` with optional ``reserve`` and ``sold``; any other column is a
covariate of the auction (a number where it reads as one, else a category), taken from its
first row and controlled for when the ``covariates`` parameter names it. Fields are separated by
commas or, as a spreadsheet in a comma-decimal locale writes them, by semicolons; with
semicolons a number may use either decimal mark. A bad row is a 422 naming its line (the
header is line 1) and its column.
"""
from __future__ import annotations

import csv
import difflib
import io

from marshmallow import ValidationError

from .query import _NUMBER

_KINDS = ("bid", "winning_bid", "price")
_OPTIONAL = ("reserve", "sold")
#: The query parameters a CSV fit takes (the JSON body's options, flat).
QUERY_KEYS = ("rule", "direction", "families", "covariates", "nonparametric", "replications", "seed", "level")


def _number(text, decimal_comma):
    t = text.strip()
    if decimal_comma and "," in t and "." not in t:
        t = t.replace(",", ".")
    if not _NUMBER.match(t):
        raise ValueError
    return float(t)


def _header(row, errors):
    cols = [c.strip() for c in row]
    kinds = [k for k in _KINDS if k in cols]
    for c in cols:
        if c == "" or cols.count(c) > 1:
            errors[f"line 1.{c}"] = ["Every column needs a name of its own."]
    for need in ("auction", "bidders"):
        if need not in cols:
            errors[f"line 1.{need}"] = ["Required column."]
    if len(kinds) != 1:
        errors["line 1"] = ["Give exactly one of the columns bid, winning_bid, price."]
    return cols, (kinds[0] if len(kinds) == 1 else None)


def _cell(row, cols, name, line, decimal_comma, errors, whole=False):
    if name not in cols:
        return None
    text = row[cols.index(name)] if cols.index(name) < len(row) else ""
    if text.strip() == "":
        return None
    try:
        x = _number(text, decimal_comma)
    except ValueError:
        errors[f"line {line}.{name}"] = [f"Must be a number, not {text!r}."]
        return None
    if whole and not x.is_integer():
        errors[f"line {line}.{name}"] = [f"Must be a whole number, not {text!r}."]
        return None
    return int(x) if whole else x


def _covariates(row, cols, decimal_comma):
    """The row's other columns, each a number where it reads as one, else a category (text); None if none."""
    out = {}
    for j, c in enumerate(cols):
        if c in ("auction", "bidders", *_KINDS, *_OPTIONAL) or j >= len(row) or row[j].strip() == "":
            continue
        try:
            out[c] = _number(row[j], decimal_comma)
        except ValueError:
            out[c] = row[j].strip()
    return out or None


def _sold(row, cols, line, errors):
    if "sold" not in cols or cols.index("sold") >= len(row) or row[cols.index("sold")].strip() == "":
        return True
    text = row[cols.index("sold")].strip().lower()
    if text not in ("true", "false", "1", "0"):
        errors[f"line {line}.sold"] = [f"Must be true or false, not {text!r}."]
    return text in ("true", "1")


def auctions_from_csv(text):
    """The records (a list of the JSON body's auctions) from a CSV text, or a ValidationError."""
    first = text.split("\n", 1)[0]
    sep = ";" if ";" in first else ","
    try:
        rows = list(csv.reader(io.StringIO(text), delimiter=sep))
    except csv.Error as e:
        raise ValidationError({"(body)": [f"The CSV body cannot be read: {e}."]}) from None
    errors = {}
    if not rows:
        raise ValidationError({"line 1": ["The CSV body is empty: give a header and a row per auction or bid."]})
    cols, kind = _header(rows[0], errors)
    if errors:
        raise ValidationError(errors)
    auctions, order = {}, []
    for line, row in enumerate(rows[1:], start=2):
        if not any(c.strip() for c in row):
            continue
        if len(row) > len(cols):
            errors[f"line {line}"] = [f"Has {len(row)} fields; the header names {len(cols)}."]
            continue
        key = row[cols.index("auction")].strip() if cols.index("auction") < len(row) else ""
        bidders = _cell(row, cols, "bidders", line, sep == ";", errors, whole=True)
        value = _cell(row, cols, kind, line, sep == ";", errors)
        reserve = _cell(row, cols, "reserve", line, sep == ";", errors)
        sold = _sold(row, cols, line, errors)
        if key == "":
            errors[f"line {line}.auction"] = ["Required: the auction this row belongs to."]
            continue
        rec = auctions.get(key)
        if rec is None:
            rec = auctions[key] = {"bidders": bidders, "reserve": reserve, "sold": sold, "covariates": _covariates(row, cols, sep == ";")}
            order.append(key)
        elif kind != "bid":
            errors[f"line {line}.auction"] = [f"Auction {key!r} has a row of its own already: one row per auction for {kind}."]
            continue
        elif (rec["bidders"], rec["reserve"], rec["sold"]) != (bidders, reserve, sold):
            errors[f"line {line}"] = [f"Auction {key!r} gave other bidders, reserve or sold on an earlier line."]
        if kind == "bid":
            if value is not None:
                rec.setdefault("bids", []).append(value)
        elif value is not None:
            if kind in rec:
                errors[f"line {line}.auction"] = [f"Auction {key!r} has a {kind} on an earlier line already."]
            rec[kind] = value
    if errors:
        raise ValidationError(errors)
    return [{k: v for k, v in auctions[key].items() if v is not None} for key in order]


def options_from_query(args):
    """The fit's options from the query string (the JSON body's names, flat)."""
    errors = {}
    for key in args:
        if key not in QUERY_KEYS:
            close = difflib.get_close_matches(key, QUERY_KEYS, n=1, cutoff=0.6)
            errors[key] = ["Unknown parameter" + (f"; did you mean {close[0]!r}?" if close else f": one of {', '.join(QUERY_KEYS)}.")]
        elif len(args.getlist(key)) > 1:
            errors[key] = ["Given more than once: which value was meant is unknowable."]
    body = {}
    for key in ("rule", "direction"):
        if key in args:
            body[key] = args[key]
    for key in ("families", "covariates"):
        if key in args:
            body[key] = [f.strip() for f in args[key].replace(";", ",").split(",") if f.strip()]
    if "nonparametric" in args:
        body["nonparametric"] = {"true": True, "false": False}.get(args["nonparametric"].lower(), args["nonparametric"])
    conf = {}
    for key, whole in (("replications", True), ("seed", True), ("level", False)):
        if key in args:
            try:
                x = _number(args[key], True)
                conf[key] = int(x) if whole and x.is_integer() else x
            except ValueError:
                errors[key] = [f"Must be a number, not {args[key]!r}."]
    if conf:
        body["confidence"] = conf
    if errors:
        raise ValidationError(errors)
    return body
