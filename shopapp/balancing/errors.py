"""The one exception type of the balancing core."""

from __future__ import annotations


class BalancingInputError(ValueError):
    """Bad input to a balancing computation.

    Carries the name of the offending field so the web, CLI and API layers can
    put the message beside the right input.

    Parameters
    ----------
    field : str
        Name of the input field, as the caller spelled it (``"mass_kg"``,
        ``"trials[0].readings[1]"``).
    message : str
        Plain-language reason, in the shop's words.
    """

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}")
        self.field = field
        self.message = message
