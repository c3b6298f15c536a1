"""The package's error family."""

from __future__ import annotations

import warnings

__all__ = ["HarmtrackError", "InputError", "HarmtrackWarning", "warn"]


class HarmtrackError(ValueError):
    """Base class of every error harmtrack raises on bad input or settings.

    It derives from :class:`ValueError`, so ``except ValueError`` catches it too.
    The message is one line and says what would work instead.
    """


class InputError(HarmtrackError):
    """An input file or array that cannot be analysed (missing, unreadable, empty...)."""


class HarmtrackWarning(UserWarning):
    """Legal but risky input or settings (clipping, mix-down, resampling...)."""


def warn(message: str) -> None:
    """Issue a :class:`HarmtrackWarning` pointing at the caller of the public API."""
    warnings.warn(message, HarmtrackWarning, stacklevel=3)
