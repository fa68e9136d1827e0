"""The one exception type for bad user input."""

from __future__ import annotations


class InputError(ValueError):
    """Bad input in a stack or study file.

    Carries where the problem is so that the command line can print one line
    naming the file, the layer and the key, and exit with status 2.

    Parameters
    ----------
    message
        What is wrong and what is allowed, e.g. ``"x = 1.3 outside [0, 1]"``.
    source
        File name (or ``"<dict>"`` for input built in Python).
    layer
        Zero-based layer index, or ``None`` when the key is not in a layer; the
        message counts layers from 1 (``layer 1`` is the emitter), as a grower does.
    key
        The offending key, dotted for nested tables (``"model.strain"``).
    layer_name
        The layer's name, shown beside its number.
    """

    def __init__(
        self,
        message: str,
        *,
        source: str | None = None,
        layer: int | None = None,
        key: str | None = None,
        layer_name: str | None = None,
    ) -> None:
        self.message = message
        self.source = source
        self.layer = layer
        self.key = key
        self.layer_name = layer_name
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """The message as the command line prints it."""
        where = []
        if self.source:
            where.append(str(self.source))
        if self.layer is not None:
            name = f" ('{self.layer_name}')" if self.layer_name else ""
            where.append(f"layer {self.layer + 1}{name}")
        if self.key:
            where.append(f"key '{self.key}'")
        prefix = ": ".join([", ".join(where)]) if where else ""
        return f"{prefix}: {self.message}" if prefix else self.message
