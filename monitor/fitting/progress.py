"""How a fit job reports progress: an object the caller passes (the CLI draws bars).

The job never prints; it calls these methods on the ``progress`` object it was given,
or nothing when it was given ``None``.
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable


@runtime_checkable
class FitProgress(Protocol):
    """What a fit job tells its caller while it works."""

    def loading(self, done: int, total: int, name: str) -> None:
        """``done`` of ``total`` batches read from the historian; ``name`` the latest."""

    def stage(self, text: str) -> None:
        """A new stage began (``"fitting power, order 2.0"``, ``"candidate power n=1.0"``)."""

    def iteration(self, n: int) -> None:
        """The optimiser's running count of iterations in the current stage."""


__all__ = ["FitProgress"]
