"""Amounts of money on the dashboard's pages: ``{% load money %}`` then ``{{ amount|money }}`` → "EUR 660.00".

Amounts are stored with more places than a page needs (spend to 1/10,000, budgets as ``Decimal("660.000000")``);
pages show totals to the cent and per-unit prices (a CPU-hour, an accepted instance) to four places, always with
the currency code of ``settings.CURRENCY`` (``EVENFRAME_CURRENCY``). Stored values and JSON keep their numbers.
"""

from __future__ import annotations

from decimal import ROUND_HALF_UP, Decimal, InvalidOperation
from typing import Any

from django import template
from django.conf import settings

register = template.Library()

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


@register.filter
def money(amount: Any, places: int | str = CENTS) -> str:
    """``{{ c.cost_budget|money }}`` → "EUR 660.00"; ``{{ price|money:4 }}`` → "EUR 0.0500"."""
    try:
        digits = int(places)
    except (TypeError, ValueError):
        digits = CENTS
    return format_money(amount, max(0, min(digits, 6)))


@register.simple_tag(name="currency")
def currency_tag() -> str:
    """``{% currency %}`` → "EUR" (form labels, JavaScript's data-currency)."""
    return currency()
