"""Parameter declarations: what a worker accepts, checked before anything runs.

A worker declares each of its parameters once, as a :class:`Param`; the spec
is validated against these declarations (``sweep.spec``), the plan fills in
defaults from them (so that a default written explicitly equals the default
left out), and the spec's error messages quote them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

#: the value types a parameter may have
KINDS = ("int", "float", "str", "bool")


@dataclass(frozen=True)
class Param:
    """One declared parameter of a worker.

    Parameters
    ----------
    kind : {"int", "float", "str", "bool"}
        The value type. An ``int`` is accepted where a ``float`` is declared.
    default : object
        The value used when a spec leaves the parameter out.
    low, high : float, optional
        Inclusive bounds for numbers unless ``low_open``/``high_open``.
    choices : tuple, optional
        The allowed values (strings, or numbers).
    nullable : bool, default=False
        Whether ``"none"`` (written in TOML as the string ``"none"``) means None.
    doc : str
        One line for the error messages and the contributor guide.
    """

    kind: str
    default: Any
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    choices: tuple[Any, ...] | None = None
    nullable: bool = False
    doc: str = field(default="", compare=False)

    def allowed(self) -> str:
        """Say in words which values are allowed."""
        if self.choices is not None:
            text = "one of " + ", ".join(repr(c) for c in self.choices)
        elif self.low is not None or self.high is not None:
            lo = "(" if self.low_open else "["
            hi = ")" if self.high_open else "]"
            low = "-inf" if self.low is None else _num(self.low)
            high = "inf" if self.high is None else _num(self.high)
            text = f"{'an integer' if self.kind == 'int' else 'a number'} in {lo}{low}, {high}{hi}"
        else:
            text = {"int": "an integer", "float": "a number", "str": "a string", "bool": "true or false"}[self.kind]
        return text + (' or "none"' if self.nullable else "")

    def check(self, value: Any) -> Any:
        """Return ``value`` in canonical form, or raise ``ValueError`` saying what is allowed."""
        if self.nullable and (value is None or (isinstance(value, str) and value.lower() == "none")):
            return None
        canonical = self._coerce(value)
        if canonical is _BAD:
            raise ValueError(f"must be {self.allowed()}, got {value!r}")
        if self.choices is not None and canonical not in self.choices:
            raise ValueError(f"must be {self.allowed()}, got {value!r}")
        if isinstance(canonical, (int, float)) and not isinstance(canonical, bool):
            if not math.isfinite(canonical) or not self._in_range(canonical):
                raise ValueError(f"must be {self.allowed()}, got {value!r}")
        return canonical

    def _coerce(self, value: Any) -> Any:
        if self.kind == "bool":
            return value if isinstance(value, bool) else _BAD
        if isinstance(value, bool):
            return _BAD
        if self.kind == "int":
            if isinstance(value, int):
                return value
            if isinstance(value, float) and value.is_integer():
                return int(value)
            return _BAD
        if self.kind == "float":
            return float(value) if isinstance(value, (int, float)) else _BAD
        return value if isinstance(value, str) else _BAD

    def _in_range(self, v: float) -> bool:
        if self.low is not None and (v < self.low or (self.low_open and v == self.low)):
            return False
        if self.high is not None and (v > self.high or (self.high_open and v == self.high)):
            return False
        return True


_BAD = object()


def _num(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(x)
