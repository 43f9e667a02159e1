"""Amounts of money as people read them: ``format_money(660)`` → "EUR 660.00" (``settings.CURRENCY``, ISO 4217).

Amounts are stored with more places than a reader needs (spend to 1/10,000, budgets as ``Decimal("660.000000")``);
pages and command output show totals to the cent and per-unit prices (a CPU-hour, an accepted instance) to four
places, always with the currency code of ``settings.CURRENCY`` (``EVENFRAME_CURRENCY``). Stored values and JSON keep
their numbers. Imports no app, so every room may use it.
"""

from __future__ import annotations

from decimal import ROUND_HALF_UP, Decimal, InvalidOperation
from typing import Any

from django.conf import settings

CENTS = 2
PER_UNIT_PLACES = 4  # prices per CPU-hour, cost per accepted instance: often fractions of a cent


def currency() -> str:
    return str(settings.CURRENCY)


def format_money(amount: Any, places: int = CENTS) -> str:
    """``"EUR 660.00"``; rounds half up; "—" for no amount (None, "", not a number)."""
    if amount is None or amount == "" or isinstance(amount, bool):
        return "—"
    try:
        value = Decimal(str(amount))
    except (InvalidOperation, ValueError):
        return "—"
    if not value.is_finite():
        return "—"
    rounded = value.quantize(Decimal(1).scaleb(-places), rounding=ROUND_HALF_UP)
    if rounded.is_zero():
        rounded = abs(rounded)  # no "EUR -0.00"
    return f"{currency()} {rounded:f}"
