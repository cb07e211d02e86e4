"""POST /v1/batch: many requests in one body, each routed to the same handler
as its single call; one bad item gets its own problem body, the rest answer."""
from __future__ import annotations

import logging

from flask import Blueprint
from marshmallow import Schema, ValidationError, fields, validate

from ..core import budget
from ..core.budget import BudgetSpent
from . import auctions, fits, sweeps, top_values
from .admission import Busy
from .fields import CappedList
from .io import json_body, json_response, load
from .problems import problem_body, spent_error, validation_body

bp = Blueprint("batch", __name__)
log = logging.getLogger("bidstats")
HANDLERS = {**top_values.HANDLERS, **auctions.HANDLERS, **sweeps.HANDLERS, **fits.HANDLERS}


def _id(value):
    if isinstance(value, bool) or not isinstance(value, (str, int)):
        raise ValidationError("Must be a string or an integer.")


class BatchItem(Schema):
    id = fields.Raw(required=True, validate=_id)
    path = fields.String(required=True, validate=validate.OneOf(sorted(HANDLERS)))
    body = fields.Dict(required=True)


class BatchRequest(Schema):
    """The envelope; each item is checked on its own so one bad item cannot sink the rest."""

    requests = CappedList(fields.Raw(allow_none=True), 1, "batch_items", required=True)


def _answer(raw):
    """(status, body) of one item. Once the request's budget is spent the rest answer
    422 at once; a heavy-slot refusal (Busy) is the whole batch's, so it propagates."""
    try:
        if budget.remaining() is not None and budget.remaining() < 0:
            raise spent_error()
        if not isinstance(raw, dict):
            raise ValidationError({"(item)": ["Must be an object with id, path and body."]})
        item = load(BatchItem, raw)
        return 200, HANDLERS[item["path"]](item["body"])
    except ValidationError as err:
        return 422, validation_body(err)
    except BudgetSpent:  # the backstop fired outside the item's core call
        return 422, validation_body(spent_error())
    except Busy:
        raise
    except Exception:  # one item's failure must not sink the others
        log.exception("batch item failed")
        return 500, problem_body(500, "Internal Server Error", "The service failed to compute this item; the error has been logged.")


@bp.post("/v1/batch")
def post_batch():
    req = load(BatchRequest, json_body())
    out = []
    for raw in req["requests"]:
        status, body = _answer(raw)
        ident = raw.get("id") if isinstance(raw, dict) else None
        out.append({"id": ident if isinstance(ident, (str, int)) and not isinstance(ident, bool) else None,
                    "status": status, "body": body})
    return json_response({"responses": out})
