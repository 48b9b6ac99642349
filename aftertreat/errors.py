"""Errors the library raises, with the fields the command line needs to report them.

A user mistake is an :class:`InputError`: it names the file, the key, the value and what was
expected, so the CLI can print one line and exit with code 2. A solver that fails to converge is a
:class:`ConvergenceError` (exit code 1); results that did not converge carry a flag instead of
raising, so callers choose.
"""
from __future__ import annotations

import difflib

__all__ = ["InputError", "ConvergenceError", "did_you_mean"]


class InputError(ValueError):
    """A bad value in user input: names the file, the key, the value and what was expected."""

    def __init__(self, expected: str, *, key: str | None = None, value: object = None,
                 file: str | None = None):
        self.expected, self.key, self.value, self.file = expected, key, value, file
        super().__init__(self._text())

    def _text(self) -> str:
        where = []
        if self.file:
            where.append(str(self.file))
        if self.key:
            where.append(f"key '{self.key}'")
        head = ": ".join(where) if where else "input"
        v = self.value
        if hasattr(v, "item") and getattr(v, "ndim", None) == 0:
            v = v.item()                          # numpy scalar: print 50.0, not np.float64(50.0)
        val = "" if v is None else f" = {v!r}"
        return f"{head}{val}: {self.expected}"

    def located(self, *, file: str | None = None, prefix: str | None = None) -> "InputError":
        """A copy with the file filled in and the key prefixed by its parent table."""
        key = self.key
        if prefix:
            key = f"{prefix}.{key}" if key else prefix
        return InputError(self.expected, key=key, value=self.value, file=file or self.file)


class ConvergenceError(RuntimeError):
    """A solver did not converge; carries the residual reached."""

    def __init__(self, message: str, residual: float = float("nan")):
        self.residual = residual
        super().__init__(message)


def did_you_mean(name: str, valid) -> str:
    """``" (did you mean X?)"`` for a near match among ``valid``, else an empty string."""
    near = difflib.get_close_matches(str(name), [str(v) for v in valid], n=3)
    return f" (did you mean {', '.join(near)}?)" if near else ""
