"""The one error of the schema layer: ``ScenarioError``, a list of per-field messages."""

from __future__ import annotations


class ScenarioError(ValueError):
    """A scenario document (or one quantity of a request) is not valid.

    ``errors`` is a list of ``{"field": "vessel.diameter", "message": "..."}``, one entry per field, each
    message naming the unit or the values expected. ``str(err)`` joins them as ``field: message`` lines.
    """

    def __init__(self, errors: list[dict[str, str]]) -> None:
        if not errors:
            errors = [{"field": "scenario", "message": "the scenario is not valid"}]
        self.errors = [{"field": str(e["field"]), "message": str(e["message"])} for e in errors]
        super().__init__("; ".join(f"{e['field']}: {e['message']}" for e in self.errors))

    @classmethod
    def single(cls, field: str, message: str) -> ScenarioError:
        """An error about one field."""
        return cls([{"field": field, "message": message}])

    @property
    def field(self) -> str:
        """The first offending field (like ``ModelInputError.field``)."""
        return self.errors[0]["field"]
