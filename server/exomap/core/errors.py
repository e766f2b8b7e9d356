"""Domain errors of the numerical core.

Each subclasses a built-in so plain ``except ValueError`` still works; the web layer maps each class to one
HTTP status code (``ModelInputError`` -> 422, ``LimitExceededError`` -> 413, ``ConvergenceError`` -> 500-free
422 with the solver message, ``BudgetExceededError`` -> 503).
"""


class ModelInputError(ValueError):
    """An input is outside the model's domain (negative volume, unknown species, NaN, ...).

    ``field`` names the offending input in the scenario's own dotted path (``"vessel.diameter"``) when known.
    """

    def __init__(self, message: str, field: str | None = None) -> None:
        super().__init__(message)
        self.field = field


class LimitExceededError(ModelInputError):
    """A request asks for more work than the documented limits allow (map cells, duration, events)."""


class ConvergenceError(RuntimeError):
    """A solver did not converge; the message says which solver and with what residual."""


class BudgetExceededError(RuntimeError):
    """A computation ran past its time budget."""
