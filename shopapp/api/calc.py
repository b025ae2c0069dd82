"""Stateless calculations: ``POST /calc/<kind>``, the same kinds and answers as
``shopapp calc KIND --json`` (:mod:`shopapp.core.calc.kinds`). Nothing is stored."""

from __future__ import annotations

from typing import Any

from flask import Blueprint

from shopapp.api.operations import Call, operation
from shopapp.api.schemas import JsonObject
from shopapp.balancing.errors import BalancingInputError
from shopapp.core.calc.kinds import KINDS, answer
from shopapp.core.errors import ValidationFailed

bp = Blueprint("api_calc", __name__)

CAUTION = ("Calculated advice only: check trial masses, speeds and drill depths against the "
           "rotor's drawing and the machine's limits before running or drilling; fit masses "
           "securely and keep clear of the rotor while it turns.")


def _handler(kind: str) -> Any:
    def calculate(call: Call) -> JsonObject:
        try:
            result = answer(kind, call.body.root)
        except BalancingInputError as exc:
            raise ValidationFailed(exc.field, exc.message) from None
        except RecursionError:
            raise ValidationFailed("request", "is nested too deeply") from None
        return JsonObject(result)

    calculate.__doc__ = (KINDS[kind].__doc__ or "").strip()
    return calculate


for _kind in KINDS:
    operation(bp, "POST", f"/calc/{_kind}", summary=f"Calculate: {_kind}", tag="calc",
              action="read", body=JsonObject, response=JsonObject, uses_db=False,
              endpoint="calc_" + _kind.replace("-", "_"),
              description=(KINDS[_kind].__doc__ or "").strip().splitlines()[0]
              + " The same request and answer as `shopapp calc " + _kind + " --json`. "
              + CAUTION)(_handler(_kind))
