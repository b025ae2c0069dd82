"""Shop measures of a month: the same figures as ``shopapp report shop --json``
(:func:`shopapp.measures.services.shop_report` and its ``to_json``)."""

from __future__ import annotations

from flask import Blueprint, current_app

from shopapp.api.operations import Call, operation
from shopapp.api.schemas import JsonObject, ShopMeasuresQuery
from shopapp.core.clock import shop_today
from shopapp.measures import services as measures
from shopapp.measures.costs import cost_settings
from shopapp.measures.periods import parse_month

bp = Blueprint("api_measures", __name__)


@operation(bp, "GET", "/measures/shop", summary="Shop measures of a month", tag="measures",
           action="view_dashboard", query=ShopMeasuresQuery, response=JsonObject)
def shop_measures(call: Call) -> JsonObject:
    """Keys as in README, "Shop measures": every rate is ``{"value", "numerator",
    "denominator", "interval_95"}``; also ``previous``, ``by``, ``trend``, ``changes``,
    ``funnels``, ``control_charts``, ``rework_cost``, ``drift``, ``definitions``."""
    q: ShopMeasuresQuery = call.query
    report = measures.shop_report(call.session, parse_month(q.month), by=call.by,
                                  today=q.as_of or shop_today(),
                                  costs=cost_settings(current_app.config))
    return JsonObject(report.to_json())
