"""Amounts of money on the dashboard's pages: ``{% load money %}`` then ``{{ amount|money }}`` → "EUR 660.00".

The formatting itself is :mod:`evenframe.money` (command output uses it too).
"""

from __future__ import annotations

from typing import Any

from django import template

from evenframe.money import CENTS, PER_UNIT_PLACES, currency, format_money

__all__ = ["CENTS", "PER_UNIT_PLACES", "currency", "format_money", "money", "currency_tag"]

register = template.Library()


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
