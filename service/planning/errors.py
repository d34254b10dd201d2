"""The input error raised by the planning core."""

from __future__ import annotations


class PlanningInputError(ValueError):
    """Invalid planning input.

    Parameters
    ----------
    message : str
        Human-readable message naming the site (when there is one) and the field.
    field : str
        Name of the offending input field, e.g. ``"demand_per_day"``, ``"capacity"``,
        ``"method"`` or ``"sites"``.
    index : int or None
        Position of the offending site in the input sequence, if a site is at fault.
    code : str or None
        Code of the offending site, if a site is at fault.
    """

    def __init__(self, message: str, *, field: str, index: int | None = None, code: str | None = None):
        super().__init__(message)
        self.field = field
        self.index = index
        self.code = code
