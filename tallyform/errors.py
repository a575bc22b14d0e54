"""Public home of tallyform's error and warning classes (see :mod:`tallyform.core.errors`)."""
from .core.errors import (Cancelled, DesignError, InputError, Location, TallyformError,
                          TallyformWarning, TooLargeError)

__all__ = ["TallyformError", "InputError", "DesignError", "TooLargeError", "Cancelled",
           "TallyformWarning", "Location"]
