"""Checks of user input that every app's services share: the structured error, names, money amounts, unique names.

A service raises :class:`InputError` (or its own subclass: ``campaigns.services.CampaignError``,
``assets.services.AssetError``) naming the input it is about (``field``) and the message for that input; forms put
the message on that field, commands and logs print ``"field: message"``. Nothing here imports an app.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from decimal import Decimal, InvalidOperation
from typing import Any

from django.db import IntegrityError, transaction

#: The largest money amount accepted where an input has no cap of its own: below what the DecimalFields can store
#: (their max_digits), so too large an input is refused with a message instead of failing in the database.
DEFAULT_MONEY_MAXIMUM = Decimal("1000000000")


class InputError(ValueError):
    """Bad input; the message says which and nothing was changed.

    ``field`` names the input the error is about (the service's keyword), or is empty for the request as a whole;
    ``message`` is the text for that input. ``str(error)`` reads ``"field: message"``.
    """

    def __init__(self, message: str, *, field: str = "") -> None:
        self.message = message
        self.field = field
        super().__init__(f"{field}: {message}" if field else message)


def clean_text(
    value: Any,
    field: str,
    *,
    max_length: int,
    required: str = "required",
    error: Callable[..., InputError] = InputError,
) -> str:
    """Required text from input, stripped, at most ``max_length`` characters, without NUL (PostgreSQL text cannot
    hold it); ``required`` is the message when it is empty. ``error`` makes the exception (the calling service's own
    :class:`InputError` subclass)."""
    if value is not None and not isinstance(value, str):
        raise error(f"expected text, got {type(value).__name__}", field=field)
    value = (value or "").strip()
    if not value:
        raise error(required, field=field)
    if len(value) > max_length:
        raise error(f"at most {max_length} characters, got {len(value)}", field=field)
    if "\x00" in value:
        raise error("must not contain NUL characters", field=field)
    return value


def clean_name(
    name: Any,
    description: str = "",
    *,
    max_length: int = 200,
    error: Callable[..., InputError] = InputError,
) -> str:
    """A required one-line name from input (stripped), checked with its optional description."""
    name = clean_text(name, "name", max_length=max_length, error=error)
    if "\x00" in (description or ""):
        raise error("must not contain NUL characters", field="description")
    return name


def clean_amount(
    value: Any,
    field: str,
    *,
    minimum: Decimal = Decimal(0),
    maximum: Decimal = DEFAULT_MONEY_MAXIMUM,
    error: Callable[..., InputError] = InputError,
) -> Decimal:
    """A money amount from input, finite and within [``minimum``, ``maximum``]; ``field`` names the input."""
    if isinstance(value, bool):
        raise error(f"expected a number, got {value!r}", field=field)
    try:
        number = Decimal(str(value).strip())
    except (InvalidOperation, ValueError) as exc:
        raise error(f"expected a number, got {value!r}", field=field) from exc
    if not number.is_finite():
        raise error(f"must be finite, got {value!r}", field=field)
    if number < minimum:
        raise error(f"must be at least {minimum}, got {number}", field=field)
    if number > maximum:
        raise error(f"must be at most {maximum}, got {number}", field=field)
    return number


@contextmanager
def name_guard(conflict: Callable[[], InputError | None]) -> Iterator[None]:
    """Run an insert or rename of a uniquely named row; a unique violation becomes the name check's own error.

    The name was checked before (``conflict()`` returned None), but another request may have taken it since. The
    write runs in a savepoint, so the violation rolls back only the write and the enclosing transaction can ask
    again: under PostgreSQL's READ COMMITTED the violation is raised once the other transaction has committed, so
    the row it wrote is visible to the new query (SQLite writers never overlap: ``transaction_mode = IMMEDIATE``).
    Any other integrity error is not a name clash and propagates.
    """
    try:
        with transaction.atomic():
            yield
    except IntegrityError:
        error = conflict()
        if error is None:
            raise
        raise error from None
