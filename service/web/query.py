"""Flat query strings for the GET doors (spreadsheets): numbers, the value model
and error lines. The query becomes the body of a POST resource, loaded by that
resource's own schema, so the rules and caps stay in one place."""
from __future__ import annotations

import re

from flask import Response
from marshmallow import ValidationError

from ..core import models as M
from .problems import flatten

_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")
MODEL_KEYS = sorted({k for cls in M.PARAMETRIC.values() for k in cls.parameters} | {"truncate_low", "truncate_high"})


def number(key, raw, errors):
    """A query value as a JSON number: digits, '.', an exponent; nothing else."""
    if not _NUMBER.match(raw):
        errors[key] = [f"Must be a number written with digits and '.', not {raw!r}."]
        return None
    x = float(raw)
    return int(x) if x.is_integer() and "." not in raw and "e" not in raw.lower() else x


def number_list(key, raw, errors):
    """A comma-separated list of numbers."""
    out, bad = [], {}
    for i, part in enumerate(raw.split(",")):
        out.append(number(f"{key}.{i}", part.strip(), bad))
    if bad:
        errors[key] = [msg for msgs in bad.values() for msg in msgs]
    return out


def direction(args, errors):
    d = args.get("direction", "forward")
    if d not in ("forward", "reverse"):
        errors["direction"] = ["Must be forward or reverse."]
    return d


def case_body(args, errors, keys):
    """The value model (flattened in the query) under its direction's name, plus ``keys``."""
    family = args.get("family")
    if family not in M.PARAMETRIC:
        errors["family"] = [f"One of the parametric families: {', '.join(sorted(M.PARAMETRIC))} "
                            "(mixtures, tables and samples need POST)."]
    model = {"family": family}
    for key in MODEL_KEYS:
        if key in args:
            value = number(key, args[key], errors)
            if key.startswith("truncate_"):
                model.setdefault("truncate", {})[key.removeprefix("truncate_")] = value
            else:
                model[key] = value
    body = {("bidder_values" if direction(args, errors) == "forward" else "bidder_costs"): model}
    for key in keys:
        if key in args:
            body[key] = number(key, args[key], errors)
    return body


def unknown(args, known, errors):
    """Unknown names, and names given more than once (which value was meant is unknowable)."""
    for key in args:
        if key not in known:
            errors[key] = ["Unknown parameter (mixtures, tables and samples need POST)."]
        elif len(args.getlist(key)) > 1:
            errors[key] = [f"Given {len(args.getlist(key))} times; give each parameter once."]


def flat_errors(err):
    """Query parameters are flat: report ``median``, not ``bidder_values.median``."""
    messages = err.messages
    if not isinstance(messages, dict):
        return err
    out = {}
    for key, val in messages.items():
        if key in ("bidder_values", "bidder_costs") and isinstance(val, dict):
            for k, v in val.items():
                if k == "truncate" and isinstance(v, dict):
                    for tk, tv in v.items():
                        out[f"truncate_{tk}"] = tv
                else:
                    out[k] = v
        else:
            out[key] = val
    return ValidationError(out)


def text_error(err, status=422):
    """One plain line naming every offending parameter."""
    line = "; ".join(f"{e['field']}: {e['message']}" for e in flatten(err.messages))
    return Response(f"error: {line}\n", status=status, mimetype="text/plain")
