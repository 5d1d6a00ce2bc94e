"""Exceptions raised by hopmap. Each names the file (or in-memory source), the place in it when
known (line and column, data block and site, entry, or the option), and says what is wrong."""

from __future__ import annotations

from typing import Optional


class HopmapError(Exception):
    """Base class of hopmap's errors.

    Attributes: ``kind`` (``input``, ``options``, ``model``, ``structure``, ``cancelled``),
    ``file`` and ``place`` (``None`` when unknown) and ``message`` (the sentence alone).
    """

    def __init__(
        self,
        text: str,
        kind: str = "input",
        file: Optional[str] = None,
        place: Optional[str] = None,
        message: Optional[str] = None,
    ) -> None:
        super().__init__(text)
        self.kind = kind
        self.file = file
        self.place = place
        self.message = message if message is not None else text


class InputError(HopmapError):
    """The input could not be read: a missing file, bad syntax, an impossible cell."""


class OptionsError(HopmapError, ValueError):
    """An option is out of its range or unknown; ``place`` names the option."""


class ModelError(HopmapError):
    """The bond-valence model cannot be built (a missing pair, oxidation state or radius)."""


class StructureError(HopmapError):
    """The structure cannot host the analysis."""


class OverBudgetError(HopmapError):
    """The grid would exceed the memory or time budget; the message gives the estimate and a
    spacing that would fit."""


class Cancelled(HopmapError):
    """The progress callback asked the analysis to stop."""
