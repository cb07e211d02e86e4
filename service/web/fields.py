"""Strict marshmallow fields and the value-model field.

JSON numbers arrive as Python ints or floats; booleans and strings are never
taken for numbers, non-finite numbers are refused, and an integer field takes
only integral values (2.5 bidders is an error, not 2).
"""
from __future__ import annotations

import functools
import math

from flask import current_app, has_app_context
from marshmallow import Schema, ValidationError, fields, validate, validates_schema

from .. import settings
from ..core import models as M
from ..core import rules
from ..core.bidders import Bidders, CostlyEntry, check_counts
from ..core.errors import ParameterError


#: Largest magnitude of any number in a request: its square must stay finite.
MAX_MAGNITUDE = 1e150


def caps():
    """The running app's caps (create_app's config over the environment), or the
    environment's outside an app."""
    return current_app.extensions["bidstats.caps"] if has_app_context() else settings.CAPS


def _limit(bound):
    """(the bound, its cap's variable or None): a number, a cap named by its field, or a
    function giving the bound when a request loads."""
    if isinstance(bound, str):
        return getattr(caps(), bound), settings.ENV_NAMES[bound]
    return (bound() if callable(bound) else bound), None


class RuleName(fields.String):
    """The name of a registered auction rule (``core.rules``), read when a request loads."""

    def _deserialize(self, value, attr, data, **kw):
        name = super()._deserialize(value, attr, data, **kw)
        if name not in rules.names():
            raise ValidationError(f"Must be one of: {', '.join(rules.names())}.")
        return name


def rule_list(**kw):
    """A list of rule names, each at most once, at most as many as there are rules."""
    return CappedList(RuleName(), 1, lambda: len(rules.names()), validate=_once, **kw)


def _once(names):
    if len(set(names)) != len(names):
        raise ValidationError("Each rule at most once.")


class StrictFloat(fields.Field):
    """A finite JSON number; ``bound`` may require it positive or non-negative."""

    def __init__(self, bound=None, **kw):
        super().__init__(**kw)
        self.bound = bound

    def _deserialize(self, value, attr, data, **kw):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValidationError("Must be a number.")
        try:
            x = float(value)
        except OverflowError:
            raise ValidationError("Must be a finite number.") from None
        if not math.isfinite(x):
            raise ValidationError("Must be a finite number.")
        if abs(x) > MAX_MAGNITUDE:
            raise ValidationError(f"Must be at most {MAX_MAGNITUDE:g} in magnitude (squares must stay finite).")
        if self.bound == "positive" and not x > 0:
            raise ValidationError("Must be greater than 0.")
        if self.bound == "nonnegative" and not x >= 0:
            raise ValidationError("Must be at least 0.")
        if self.bound == "probability" and not 0.0 <= x <= 1.0:
            raise ValidationError("Must be between 0 and 1.")
        if self.bound == "open_probability" and not 0.0 < x < 1.0:
            raise ValidationError("Must lie strictly between 0 and 1.")
        return x


class StrictInteger(fields.Field):
    """An integral JSON number within [minimum, maximum]; ``maximum`` may name a cap."""

    def __init__(self, minimum=None, maximum=None, **kw):
        super().__init__(**kw)
        self.minimum, self.maximum = minimum, maximum

    def _deserialize(self, value, attr, data, **kw):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ValidationError("Must be an integer.")
        if isinstance(value, float) and not (math.isfinite(value) and value.is_integer()):
            raise ValidationError("Must be an integer.")
        n = int(value)
        if self.minimum is not None and n < self.minimum:
            raise ValidationError(f"Must be at least {self.minimum}.")
        maximum, cap = _limit(self.maximum)
        if maximum is not None and n > maximum:
            raise ValidationError(f"Must be at most {maximum}" + (f" (the service's cap, {cap})." if cap else "."))
        return n


class CappedList(fields.List):
    """A list whose length is checked on the raw JSON, before any element is loaded,
    so that an over-long list costs nothing to refuse; ``maximum`` may name a cap."""

    def __init__(self, inner, minimum=None, maximum=None, **kw):
        super().__init__(inner, **kw)
        self.minimum, self.maximum = minimum, maximum

    def _deserialize(self, value, attr, data, **kw):
        if isinstance(value, list):
            n = len(value)
            maximum, cap = _limit(self.maximum)
            if maximum is not None and n > maximum:
                raise ValidationError(f"Holds {n} items; at most {maximum}" + (f" (the service's cap, {cap})." if cap else "."))
            if self.minimum is not None and n < self.minimum:
                raise ValidationError(f"Must hold at least {self.minimum} item(s)." if self.minimum != self.maximum
                                      else f"Must hold exactly {self.minimum} items.")
        return super()._deserialize(value, attr, data, **kw)


def _param_field(p: M.Param):
    if p.required:
        return StrictFloat(bound=p.bound, required=True)
    return StrictFloat(bound=p.bound, load_default=p.default)


class TruncateSchema(Schema):
    low = StrictFloat(load_default=None)
    high = StrictFloat(load_default=None)


def _parametric_schema(cls):
    attrs = {name: _param_field(p) for name, p in cls.parameters.items()}
    attrs["family"] = fields.String(required=True)
    attrs["truncate"] = fields.Nested(TruncateSchema, load_default=None)
    return Schema.from_dict(attrs, name=f"{cls.family.title()}Values")


class PointSchema(Schema):
    p = StrictFloat(bound="probability", required=True)
    value = StrictFloat(required=True)


class QuantileTableSchema(Schema):
    family = fields.String(required=True)
    points = CappedList(fields.Nested(PointSchema), 2, 1000, required=True)
    low = StrictFloat(load_default=None)
    high = StrictFloat(load_default=None)


class EmpiricalSchema(Schema):
    family = fields.String(required=True)
    sample = CappedList(StrictFloat(), maximum="sample", required=True)
    smoothing = fields.String(load_default="kernel", validate=validate.OneOf(["kernel", "none"]))
    low = StrictFloat(load_default=None)
    high = StrictFloat(load_default=None)


class ComponentSchema(Schema):
    weight = StrictFloat(bound="probability", required=True)
    model = fields.Raw(required=True)


class MixtureSchema(Schema):
    family = fields.String(required=True)
    components = CappedList(fields.Nested(ComponentSchema), 1, "components", required=True)


@functools.lru_cache(maxsize=None)
def _schema_for(cls):
    """A parametric family's schema, generated from its ``parameters`` once."""
    return _parametric_schema(cls)()


def families():
    """Every family a request may name: the registered parametric ones and the three built
    from data (read when a request loads, so a family registered later is accepted)."""
    return sorted([*M.PARAMETRIC, "empirical", "quantile_table", "mixture"])
_TABLE, _EMPIRICAL, _MIXTURE = QuantileTableSchema(), EmpiricalSchema(), MixtureSchema()


def _at(path, message):
    """A marshmallow error dict placing ``message`` at a dotted ``path``."""
    out = [message]
    for key in reversed(path.split(".")):
        out = {int(key) if key.isdigit() else key: out}
    return out


def build_value_model(data, depth=0):
    """Validate a value-model object and build the core model it describes.

    Raises ValidationError with errors keyed by field path inside the object.
    """
    if not isinstance(data, dict):
        raise ValidationError("Must be an object with a family and its parameters.")
    family = data.get("family")
    if family is None:
        raise ValidationError({"family": ["Missing data for required field."]})
    if family not in families():
        raise ValidationError({"family": [f"Unknown family; one of: {', '.join(families())}."]})
    try:
        if family in M.PARAMETRIC:
            d = _schema_for(M.PARAMETRIC[family]).load(data)
            trunc = d.pop("truncate")
            d.pop("family")
            model = M.PARAMETRIC[family](**{k: v for k, v in d.items() if v is not None or M.PARAMETRIC[family].parameters[k].required})
            if trunc is not None and (trunc["low"] is not None or trunc["high"] is not None):
                if trunc["low"] is not None and trunc["high"] is not None and not trunc["high"] > trunc["low"]:
                    raise ParameterError("truncate.high", "must be greater than truncate.low")
                model = M.Truncated(model, trunc["low"], trunc["high"])
            return model
        if family == "quantile_table":
            d = _TABLE.load(data)
            return M.QuantileTable([(p["p"], p["value"]) for p in d["points"]], d["low"], d["high"])
        if family == "empirical":
            d = _EMPIRICAL.load(data)
            n = len(d["sample"])
            if n < 5:
                raise ParameterError("sample", "needs at least 5 past values")
            return M.empirical(d["sample"], d["smoothing"], d["low"], d["high"])
        d = _MIXTURE.load(data)
        if depth >= 2:
            raise ParameterError("components", "mixtures nest at most two deep")
        comps, errors = [], {}
        for i, c in enumerate(d["components"]):
            try:
                comps.append((c["weight"], build_value_model(c["model"], depth + 1)))
            except ValidationError as e:
                errors[i] = {"model": e.messages}
        if errors:
            raise ValidationError({"components": errors})
        return M.Mixture(comps)
    except ParameterError as e:
        raise ValidationError(_at(e.field, e.message)) from None


class _PoissonCount(Schema):
    distribution = fields.String(required=True)
    mean = StrictFloat(bound="positive", required=True)


class _BinomialCount(Schema):
    distribution = fields.String(required=True)
    potential = StrictInteger(minimum=1, maximum="bidders", required=True)
    entry_probability = StrictFloat(bound="probability", required=True)


class _CountRow(Schema):
    bidders = StrictInteger(minimum=0, maximum="bidders", required=True)
    p = StrictFloat(bound="probability", required=True)


class _TableCount(Schema):
    distribution = fields.String(required=True)
    probabilities = CappedList(fields.Nested(_CountRow), 1, "bidder_counts", required=True)

    @validates_schema
    def _sums_to_one(self, data, **kw):
        total = math.fsum(row["p"] for row in data.get("probabilities", ()))
        if abs(total - 1.0) > 1e-9:
            raise ValidationError({"probabilities": [f"The probabilities sum to {total:.12g}; they must sum to 1 (within 1e-9)."]})


class _EntryCount(Schema):
    distribution = fields.String(required=True)
    potential = StrictInteger(minimum=1, maximum="bidder_counts", required=True)
    entry_cost = StrictFloat(bound="nonnegative", required=True)


_COUNTS = {"poisson": _PoissonCount(), "binomial": _BinomialCount(), "table": _TableCount(), "entry": _EntryCount()}


def build_bidders(value):
    """An integer count, or a distribution object, as the core's ``Bidders`` (``CostlyEntry``
    for costly entry, which the core resolves against the value model and the reserve)."""
    if not isinstance(value, dict):
        return StrictInteger(minimum=1, maximum="bidders").deserialize(value)
    kind = value.get("distribution")
    if not isinstance(kind, str) or kind not in _COUNTS:
        raise ValidationError({"distribution": [f"Must be one of: {', '.join(_COUNTS)} (or give an integer)."]})
    d = _COUNTS[kind].load(value)
    if kind == "entry":
        return CostlyEntry(d["potential"], d["entry_cost"])
    if kind == "poisson":
        if d["mean"] > caps().bidders:
            raise ValidationError({"mean": [f"Must be at most {caps().bidders} (the service's cap, {settings.ENV_NAMES['bidders']})."]})
        count, field = Bidders.poisson(d["mean"]), "mean"
    elif kind == "binomial":
        count, field = Bidders.binomial(d["potential"], d["entry_probability"]), "entry_probability"
    else:
        count, field = Bidders.table([(row["bidders"], row["p"]) for row in d["probabilities"]]), "probabilities"
    try:
        return check_counts(count, field, caps().bidder_counts, caps().bidders)
    except ParameterError as e:
        raise ValidationError(_at(e.field, e.message + f" (the service's caps, {settings.ENV_NAMES['bidder_counts']} "
                                                       f"and {settings.ENV_NAMES['bidders']})")) from None


class BiddersField(fields.Field):
    """``bidders``: an integer, or a distribution over the count (see ``build_bidders``)."""

    def _deserialize(self, value, attr, data, **kw):
        return build_bidders(value)


class MonteCarlo(Schema):
    """A simulation check on demand: ``draws`` simulated auctions from ``seed``."""

    draws = StrictInteger(minimum=1, maximum="draws", required=True)
    seed = StrictInteger(minimum=0, maximum=2**63 - 1, load_default=0)


#: Estimated work (admission units) per simulated auction and rule.
WORK_PER_DRAW = 3e-4


def count_work(count):
    """How many auctions' figures a count asks for: one per count it spans (costly entry
    adds one per potential bidder to find the entry probability)."""
    if isinstance(count, int):
        return 1
    return 2 * count.potential if isinstance(count, CostlyEntry) else len(count.counts)


def most_bidders(count):
    """The largest count that can occur (an integer as it is)."""
    if isinstance(count, int):
        return count
    return count.potential if isinstance(count, CostlyEntry) else count.counts[-1]


class ValueModelField(fields.Field):
    """A bidder-value (or bidder-cost) model object, loaded into a core model."""

    def _deserialize(self, value, attr, data, **kw):
        return build_value_model(value)


class BidGrid(Schema):
    """Where bids are asked for: ``points`` values across the support, or the values ``at``."""

    points = StrictInteger(minimum=2, maximum="curve_points", load_default=None)
    at = CappedList(StrictFloat(), 1, "points", load_default=None)

    @validates_schema
    def _grid(self, data, **kw):
        if data.get("points") is not None and data.get("at") is not None:
            raise ValidationError({"at": ["Give points or at, not both."]})
