"""Flat query strings for the GET doors (spreadsheets): numbers in either decimal mark,
the value model, and error lines a cell can show. The query becomes the body of a POST
resource, loaded by that resource's own schema, so the rules and caps stay in one place."""
from __future__ import annotations

import difflib
import re

from flask import Response
from marshmallow import ValidationError

from ..core import models as M
from .problems import flatten

_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")
#: A list item that no one writes as a number of its own: digits with a leading 0, as the
#: thousands groups of "40,000" or "1,050" are when a thousands separator splits them off.
_THOUSANDS_GROUP = re.compile(r"^0\d+$")
def model_keys():
    """The query names of the parametric families' parameters (read when a request loads)."""
    return sorted({k for cls in M.PARAMETRIC.values() for k in cls.parameters} | {"truncate_low", "truncate_high"})
#: Parameters every GET door takes: how numbers are written and how errors are answered.
FORMAT_KEYS = ("decimal", "errors")


class Door:
    """How one GET request writes its numbers and wants its errors: ``decimal`` is the mark
    in single numbers ('.' or ','); list items are separated by ';' when it is ',' (as
    comma-decimal spreadsheets do), else by ','; ``inline`` answers an error as 200 text."""

    def __init__(self, args, errors):
        self.decimal = args.get("decimal", ".")
        if self.decimal not in (".", ","):
            errors["decimal"] = ["Must be '.' (the default) or ','."]
            self.decimal = "."
        self.items = ";" if self.decimal == "," else ","
        mode = args.get("errors", "status")
        if mode not in ("status", "inline"):
            errors["errors"] = ["Must be status (the default: a 4xx answer) or inline (a 200 answer whose text is the error line)."]
        self.inline = mode == "inline"

    def number(self, key, raw, errors):
        """A query value as a JSON number: digits, the decimal mark, an exponent; nothing else."""
        text = raw.strip()
        other = "," if self.decimal == "." else "."
        if other in text:
            hint = ("set decimal=, to write it with a comma" if other == "," else "with decimal=, write the decimal mark as ','")
            errors[key] = [f"{raw!r} is not a number here: {hint}, and drop any thousands separator."]
            return None
        text = text.replace(",", ".") if self.decimal == "," else text
        if not _NUMBER.match(text):
            errors[key] = [f"Must be a number written with digits and {self.decimal!r}, not {raw!r}."]
            return None
        x = float(text)
        return int(x) if x.is_integer() and "." not in text and "e" not in text.lower() else x

    def number_list(self, key, raw, errors):
        """A list of numbers separated by ``items``; an item that can only be a thousands group
        split off by a thousands separator is refused, rather than read as a number of its own."""
        parts = [p.strip() for p in raw.split(self.items)]
        for i, part in enumerate(parts):
            if _THOUSANDS_GROUP.match(part):
                whole = (parts[i - 1] + self.items if i else "") + part
                errors[key] = [f"{whole!r} looks like one number written with a thousands separator, which splits it into "
                               f"two items: write numbers without thousands separators ({whole.replace(self.items, '')!r})."]
                return None
        out, bad = [], {}
        for i, part in enumerate(parts):
            out.append(self.number(f"{key}.{i}", part, bad))
        if bad:
            errors[key] = [msg for msgs in bad.values() for msg in msgs]
        return out

    def names(self, raw):
        """A list of names (rules, metrics): separated by ',' or ';' alike."""
        return [x.strip() for x in re.split(r"[,;]", raw)]

    def format(self, x):
        """A number as text with this door's decimal mark, at full precision."""
        text = repr(float(x))
        return text.replace(".", ",") if self.decimal == "," else text

    def error(self, err, status=422):
        """The error line: as a 200 answer with ``inline``, else with the error's status."""
        return text_error(err, 200 if self.inline else status)


def direction(args, errors):
    d = args.get("direction", "forward")
    if d not in ("forward", "reverse"):
        errors["direction"] = ["Must be forward or reverse."]
    return d


def case_body(args, door, errors, keys):
    """The value model (flattened in the query) under its direction's name, plus ``keys``."""
    family = args.get("family")
    if family not in M.PARAMETRIC:
        errors["family"] = [f"One of the parametric families: {', '.join(sorted(M.PARAMETRIC))} "
                            "(mixtures, tables and samples need POST)."]
    model = {"family": family}
    for key in model_keys():
        if key in args:
            value = door.number(key, args[key], errors)
            if key.startswith("truncate_"):
                model.setdefault("truncate", {})[key.removeprefix("truncate_")] = value
            else:
                model[key] = value
    body = {("bidder_values" if direction(args, errors) == "forward" else "bidder_costs"): model}
    for key in keys:
        if key in args:
            body[key] = door.number(key, args[key], errors)
    if "bidders" in keys and "bidders_distribution" in args:
        if "bidders" in args:
            errors["bidders"] = ["Give bidders (a number) or bidders_distribution with its parameters, not both."]
        body["bidders"] = count_body(args, door, errors)
    return body


#: The flat names of a count's distribution: bidders_distribution and its parameters.
COUNT_KEYS = ("bidders_distribution", "bidders_mean", "bidders_potential", "bidders_entry_probability", "bidders_entry_cost")


def count_body(args, door, errors):
    """``bidders`` as a distribution object from the flat names (``COUNT_KEYS``); a table of
    counts needs POST."""
    kind = args["bidders_distribution"]
    if kind == "table":
        errors["bidders_distribution"] = ["A table of counts needs POST; here poisson, binomial or entry."]
    out = {"distribution": kind}
    for key in COUNT_KEYS[1:]:
        if key in args:
            out[key.removeprefix("bidders_")] = door.number(key, args[key], errors)
    return out


def unknown(args, known, errors):
    """Unknown names (with the closest known one, or the right case), and names given more
    than once (which value was meant is unknowable)."""
    known = set(known) | set(FORMAT_KEYS)
    by_lower = {k.lower(): k for k in known}
    for key in args:
        if key not in known:
            if key.lower() in by_lower:
                errors[key] = [f"Parameter names are lower case: write {by_lower[key.lower()]!r}."]
                continue
            close = difflib.get_close_matches(key, sorted(known), n=1, cutoff=0.6)
            hint = f"; did you mean {close[0]!r}?" if close else " (mixtures, tables and samples need POST)."
            errors[key] = ["Unknown parameter" + hint]
        elif len(args.getlist(key)) > 1:
            errors[key] = [f"Given {len(args.getlist(key))} times; give each parameter once."]


def flat_errors(err):
    """Query parameters are flat: report ``median``, not ``bidder_values.median``, and a
    range's ``reserves_steps``, not ``reserves.steps``; a list's item errors under the
    list's own name."""
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
        elif isinstance(val, dict) and all(isinstance(k, str) and k != "_schema" for k in val):
            for k, v in val.items():
                out[f"{key}_{k}"] = v
        elif isinstance(val, dict):
            out[key] = [e["message"] for e in flatten(val)]
        else:
            out[key] = val
    return ValidationError(out)


def text_error(err, status=422):
    """One plain line naming every offending parameter."""
    line = "; ".join(f"{e['field']}: {e['message']}" for e in flatten(err.messages))
    return Response(f"error: {line}\n", status=status, mimetype="text/plain")


#: A group's flat names after its prefix ``group<k>_`` (k from 1): name, count, preference, the model.
GROUP_FIELDS = ("name", "count", "preference", "family")


def group_keys(most):
    """Every flat group name for up to ``most`` groups: group1_name, group1_count, group1_low..."""
    return {f"group{k}_{f}" for k in range(1, most + 1) for f in (*GROUP_FIELDS, *model_keys())}


def asks_for_groups(args):
    return any(key.startswith("group") and "_" in key for key in args)


def groups_body(args, door, errors, most):
    """``bidder_groups`` (forward) or ``cost_groups`` (reverse) from group1_..., group2_..., in order."""
    out = []
    for k in range(1, most + 1):
        prefix = f"group{k}_"
        given = {key.removeprefix(prefix): raw for key, raw in args.items() if key.startswith(prefix)}
        if not given:
            continue
        if len(out) != k - 1:
            errors[f"group{k}_name"] = [f"Groups are numbered from 1 without gaps; group{len(out) + 1} is missing."]
        group, model = {}, {"family": given.get("family")}
        if model["family"] not in M.PARAMETRIC:
            errors[f"{prefix}family"] = [f"One of the parametric families: {', '.join(sorted(M.PARAMETRIC))}."]
        for key, raw in given.items():
            if key == "name":
                group["name"] = raw
            elif key in ("count", "preference"):
                group[key] = door.number(prefix + key, raw, errors)
            elif key.startswith("truncate_"):
                model.setdefault("truncate", {})[key.removeprefix("truncate_")] = door.number(prefix + key, raw, errors)
            elif key != "family":
                model[key] = door.number(prefix + key, raw, errors)
        group["bidder_values" if direction(args, {}) == "forward" else "bidder_costs"] = model
        out.append(group)
    return {("bidder_groups" if direction(args, {}) == "forward" else "cost_groups"): out}


def flat_group_errors(err):
    """A group request's errors under the flat names: cost_groups.0.bidder_costs.low is group1_low."""
    messages = err.messages
    if not isinstance(messages, dict):
        return err
    out = {}
    for key, val in messages.items():
        if key in ("bidder_groups", "cost_groups") and isinstance(val, dict):
            for i, fields_ in val.items():
                prefix = f"group{int(i) + 1}_"
                for f, v in (fields_.items() if isinstance(fields_, dict) else [("name", fields_)]):
                    if f in ("bidder_values", "bidder_costs") and isinstance(v, dict):
                        for mk, mv in v.items():
                            if mk == "truncate" and isinstance(mv, dict):
                                out.update({f"{prefix}truncate_{tk}": tv for tk, tv in mv.items()})
                            else:
                                out[prefix + mk] = mv
                    else:
                        out[prefix + f] = v
        elif key in ("bidder_groups", "cost_groups"):
            out["groups"] = val
        else:
            out[key] = val
    return flat_errors(ValidationError(out))
