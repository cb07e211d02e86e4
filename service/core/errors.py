"""Errors the numerics core raises; the web layer turns them into 422 problems."""


class ParameterError(ValueError):
    """A request parameter the mathematics cannot accept, with its field path
    relative to the object that holds it (e.g. ``"sd"`` or ``"points.2.p"``)."""

    def __init__(self, field: str, message: str):
        super().__init__(f"{field}: {message}")
        self.field = field
        self.message = message
