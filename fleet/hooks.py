"""What the fleet calls without knowing who answers: the recovery sweep that every live worker runs.

``fleet`` never imports ``campaigns``; ``campaigns`` registers its sweep here when Django starts
(``campaigns.apps.CampaignsConfig.ready``).
"""

from __future__ import annotations

from collections.abc import Callable

_sweep: Callable[[], dict[str, int]] | None = None


def register_sweep(sweep: Callable[[], dict[str, int]]) -> None:
    """Set the recovery sweep (a callable returning counts such as ``requeued``, ``dead``, ``revoked``)."""
    global _sweep
    _sweep = sweep


def run_sweep() -> dict[str, int] | None:
    """Run the registered sweep; None when nothing registered one (a fleet without campaigns)."""
    return _sweep() if _sweep is not None else None
