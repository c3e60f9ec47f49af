"""Parameter constraints declared as data, and the one place that checks them.

Every configurable object in the package (demand systems, markets, strategies, learners) declares a
class attribute ``_constraints`` mapping each constructor argument to a constraint object. The
constructor only stores its arguments; :meth:`Parametrized.validate` checks them all and returns
normalised values. Keeping ``__init__`` store-only means objects can be cloned and re-parameterised
(``set_params``) by sweeps, and the common test in ``tests/test_params.py`` can check every class the
same way: the constraints cover exactly the signature, bad values raise, and clones round-trip.
"""

from __future__ import annotations

import inspect
import math
import numbers
from collections.abc import Sequence
from typing import Any

import numpy as np

from sim.core.errors import InputError

__all__ = [
    "Boolean",
    "Integer",
    "Interval",
    "Options",
    "Parametrized",
    "PerFirm",
    "Real",
    "agreeing_length",
    "describe_parameters",
    "optional",
]


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, np.ndarray):
        return repr(value.tolist())
    return repr(value)


class Constraint:
    """Base class: ``check(key, value)`` returns the normalised value or raises InputError."""

    def check(self, key: str, value: Any) -> Any:  # pragma: no cover - interface
        """The value, normalised, or an :class:`InputError` naming ``key``.

        Parameters
        ----------
        key : str
            Key path of the value, for the error message (e.g. ``strategies[2].length``).
        value : object
            The value as given.

        Returns
        -------
        object
            The normalised value.
        """
        raise NotImplementedError

    def describe(self) -> str:  # pragma: no cover - interface
        """What the constraint allows, in words (for error messages).

        Returns
        -------
        str
        """
        raise NotImplementedError

    def example_bad(self) -> Any:
        """A value this constraint must refuse (used by the common parameter test).

        Returns
        -------
        object
        """
        return "not-a-valid-value"


class Real(Constraint):
    """A finite real number in an interval.

    Parameters
    ----------
    low, high : float or None
        Bounds; None means unbounded on that side.
    closed : {"both", "left", "right", "neither"}
        Which bounds belong to the interval.
    """

    def __init__(self, low: float | None = None, high: float | None = None, closed: str = "both"):
        if closed not in ("both", "left", "right", "neither"):
            raise ValueError(f"bad closed={closed!r}")
        self.low, self.high, self.closed = low, high, closed

    def _interval(self) -> str:
        lo = "-inf" if self.low is None else f"{self.low:g}"
        hi = "inf" if self.high is None else f"{self.high:g}"
        left = "[" if self.closed in ("both", "left") and self.low is not None else "("
        right = "]" if self.closed in ("both", "right") and self.high is not None else ")"
        return f"{left}{lo}, {hi}{right}"

    def describe(self) -> str:
        return f"a number in {self._interval()}"

    def contains(self, x: float) -> bool:
        """Whether ``x`` lies in the interval, its bounds included or not as ``closed`` says.

        Parameters
        ----------
        x : float
            A finite number (the caller has checked its type).

        Returns
        -------
        bool
        """
        if self.low is not None:
            if self.closed in ("both", "left"):
                if x < self.low:
                    return False
            elif x <= self.low:
                return False
        if self.high is not None:
            if self.closed in ("both", "right"):
                if x > self.high:
                    return False
            elif x >= self.high:
                return False
        return True

    def check(self, key: str, value: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, numbers.Real):
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        x = float(value)
        if not math.isfinite(x) or not self.contains(x):
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        return x

    def example_bad(self) -> Any:
        if self.low is not None:
            return self.low - 1.0
        if self.high is not None:
            return self.high + 1.0
        return float("nan")


class Interval(Real):
    """Alias of :class:`Real` kept for readability in constraint tables.

    Parameters
    ----------
    low, high : float or None
        Bounds; None means unbounded on that side.
    closed : {"both", "left", "right", "neither"}
        Which bounds belong to the interval.
    """


class Integer(Constraint):
    """An integer in ``[low, high]`` (None: unbounded).

    A float with no fractional part (``3.0``) is accepted as that integer; a boolean is refused.

    Parameters
    ----------
    low, high : int or None
        Smallest and largest allowed value, both included; None means unbounded on that side.
    """

    def __init__(self, low: int | None = None, high: int | None = None):
        self.low, self.high = low, high

    def describe(self) -> str:
        lo = "-inf" if self.low is None else str(self.low)
        hi = "inf" if self.high is None else str(self.high)
        return f"an integer in [{lo}, {hi}]"

    def check(self, key: str, value: Any) -> int:
        if isinstance(value, bool):
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        if isinstance(value, numbers.Integral):
            v = int(value)
        elif isinstance(value, numbers.Real) and float(value).is_integer():
            v = int(value)
        else:
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        if (self.low is not None and v < self.low) or (self.high is not None and v > self.high):
            raise InputError(key, f"must be {self.describe()}, got {v}")
        return v

    def example_bad(self) -> Any:
        if self.low is not None:
            return self.low - 1
        if self.high is not None:
            return self.high + 1
        return 0.5


class Boolean(Constraint):
    def describe(self) -> str:
        return "true or false"

    def check(self, key: str, value: Any) -> bool:
        if isinstance(value, bool | np.bool_):
            return bool(value)
        raise InputError(key, f"must be true or false, got {_fmt(value)}")


class Options(Constraint):
    """One of a fixed set of strings.

    Parameters
    ----------
    *options : str
        The allowed strings, in the order error messages list them.
    """

    def __init__(self, *options: str):
        self.options = tuple(options)

    def describe(self) -> str:
        return "one of " + ", ".join(repr(o) for o in self.options)

    def check(self, key: str, value: Any) -> str:
        if not isinstance(value, str) or value not in self.options:
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        return value


class PerFirm(Constraint):
    """One number per firm, or a single number broadcast to every firm.

    The number of firms is only known when the whole object is validated, so ``check`` takes it as
    an argument (``n``). Values are checked elementwise against ``element``.

    Parameters
    ----------
    element : Real
        The constraint every value must meet.
    broadcast : bool
        Whether a single number is accepted and repeated for every firm.
    """

    def __init__(self, element: Real, broadcast: bool = True):
        self.element = element
        self.broadcast = broadcast

    def describe(self) -> str:
        return f"one value per firm, each {self.element.describe()}"

    def check(self, key: str, value: Any, n: int | None = None) -> np.ndarray:
        """The values as a float array with one entry per firm, or an :class:`InputError` naming ``key``.

        Parameters
        ----------
        key : str
            Key path of the value, for the error message (e.g. ``market.cost``).
        value : float or sequence of float or ndarray
            One number (broadcast when allowed) or one number per firm.
        n : int or None
            The number of firms; None accepts a list of any length but cannot broadcast a single number.

        Returns
        -------
        ndarray of shape (n_firms,)
            The checked values as floats.

        Raises
        ------
        InputError
            ``key`` for a value that is not a number or list of numbers, a list of the wrong length, a single
            number where a list is required, or an element outside ``element`` (named by its 1-based position).
        """
        if isinstance(value, numbers.Real) and not isinstance(value, bool):
            if not self.broadcast:
                raise InputError(key, f"must be a list of {n} values, got {_fmt(value)}")
            x = self.element.check(key, value)
            if n is None:
                raise InputError(key, "cannot broadcast a single value without the number of firms")
            return np.full(n, x, dtype=float)
        if isinstance(value, np.ndarray):
            value = value.tolist()
        if not isinstance(value, Sequence) or isinstance(value, str):
            raise InputError(key, f"must be {self.describe()}, got {_fmt(value)}")
        if n is not None and len(value) != n:
            raise InputError(key, f"must have one value per firm ({n}), got {len(value)} values")
        out = np.empty(len(value), dtype=float)
        for i, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(float(v)):
                raise InputError(key, f"value {i + 1} must be {self.element.describe()}, got {_fmt(v)}")
            if not self.element.contains(float(v)):
                raise InputError(key, f"value {i + 1} must be {self.element.describe()}, got {_fmt(v)}")
            out[i] = float(v)
        return out

    def example_bad(self) -> Any:
        return [self.element.example_bad()]


class optional(Constraint):
    """Wraps a constraint so that ``None`` is also accepted.

    Parameters
    ----------
    inner : Constraint
        The constraint a value other than None must meet.
    """

    def __init__(self, inner: Constraint):
        self.inner = inner

    def describe(self) -> str:
        return self.inner.describe() + " or nothing"

    def check(self, key: str, value: Any, *args: Any) -> Any:
        """None as None; any other value as ``inner`` normalises it.

        Parameters
        ----------
        key : str
            Key path of the value, for the error message.
        value : object
            The value as given, or None.
        *args
            Passed on to the inner constraint's ``check`` (the number of firms for :class:`PerFirm`).

        Returns
        -------
        object
            None, or the value normalised by ``inner``.

        Raises
        ------
        InputError
            When ``value`` is not None and ``inner`` refuses it.
        """
        if value is None:
            return None
        return self.inner.check(key, value, *args)

    def example_bad(self) -> Any:
        return self.inner.example_bad()


class Parametrized:
    """Mixin giving store-only construction, validation from constraints, and cloning.

    Subclasses declare ``_constraints: dict[str, Constraint]`` covering every ``__init__`` argument
    and assign each argument to an attribute of the same name in ``__init__``, doing nothing else.
    """

    _constraints: dict[str, Constraint] = {}

    @classmethod
    def _param_names(cls) -> list[str]:
        sig = inspect.signature(cls.__init__)
        return [
            p.name
            for p in sig.parameters.values()
            if p.name != "self" and p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)
        ]

    def get_params(self) -> dict[str, Any]:
        """Constructor arguments as a dict (values as stored, not validated).

        Returns
        -------
        dict
            Argument name -> value.
        """
        return {name: getattr(self, name) for name in self._param_names()}

    def set_params(self, **params: Any) -> Parametrized:
        """Set constructor arguments in place; an unknown name raises :class:`InputError`.

        Parameters
        ----------
        **params
            Constructor arguments by name.

        Returns
        -------
        Parametrized
            The object itself.
        """
        names = self._param_names()
        for k, v in params.items():
            if k not in names:
                raise InputError(k, f"unknown parameter of {type(self).__name__}; allowed: {', '.join(names)}")
            setattr(self, k, v)
        return self

    def clone(self, **changes: Any) -> Parametrized:
        """A new object with the same parameters, optionally changed.

        Parameters
        ----------
        **changes
            Constructor arguments to change, by name.

        Returns
        -------
        Parametrized
            An object of the same class.
        """
        params = self.get_params()
        params.update(changes)
        return type(self)(**params)

    def _check_params(self, prefix: str = "", n: int | None = None) -> dict[str, Any]:
        """Check every parameter against its constraint; return normalised values."""
        out = {}
        for name, constraint in self._constraints.items():
            key = f"{prefix}.{name}" if prefix else name
            value = getattr(self, name)
            if isinstance(constraint, PerFirm) or (
                isinstance(constraint, optional) and isinstance(constraint.inner, PerFirm)
            ):
                out[name] = constraint.check(key, value, n)
            else:
                out[name] = constraint.check(key, value)
        return out

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={_fmt(v)}" for k, v in self.get_params().items())
        return f"{type(self).__name__}({args})"

    def __eq__(self, other: object) -> bool:
        if type(other) is not type(self):
            return NotImplemented
        a, b = self.get_params(), other.get_params()  # type: ignore[union-attr]
        return all(_param_equal(a[k], b[k]) for k in a)

    __hash__ = None  # type: ignore[assignment]


def _param_equal(x: Any, y: Any) -> bool:
    if isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
        return np.array_equal(np.asarray(x), np.asarray(y))
    if isinstance(x, Parametrized) or isinstance(y, Parametrized):
        return x == y
    return x == y


def agreeing_length(prefix: str, lengths: list[tuple[str, int]], unit: str) -> tuple[str, int]:
    """The number of values that every list given one value per ``unit`` has, and the first key giving it.

    Parameters
    ----------
    prefix : str
        Key path of the table in error messages.
    lengths : list of (str, int)
        Key and length of each list given, in the order they are checked (not empty).
    unit : str
        What the lists give one value for (``"firm"``, ``"product"``).

    Returns
    -------
    key : str
        The first key.
    n : int
        Its length, shared by every list.

    Raises
    ------
    InputError
        At the first key whose list has another length.
    """
    key0, n0 = lengths[0]
    for key, n in lengths[1:]:
        if n != n0:
            raise InputError(f"{prefix}.{key}", f"must have one value per {unit} ({n0}, as {key0}), got {n} values")
    return key0, n0


def describe_parameters(cls: type) -> list[dict]:
    """The parameters of a configurable class, read from its constraint table and its signature (so that a listing
    of them cannot drift from what the validator accepts).

    Parameters
    ----------
    cls : type
        A :class:`Parametrized` subclass.

    Returns
    -------
    list of dict
        One per constructor argument: ``name``, ``allowed`` (the constraint's description) and ``default``
        (``None`` when the argument has none); ``default_words`` too where the class says in words what a default
        of ``None`` stands for (its ``_default_words``, e.g. a number of prices that depends on another argument).
    """
    sig = inspect.signature(cls.__init__)
    words = getattr(cls, "_default_words", {})
    out = []
    for p in sig.parameters.values():
        if p.name == "self" or p.kind in (p.VAR_POSITIONAL, p.VAR_KEYWORD):
            continue
        c = getattr(cls, "_constraints", {}).get(p.name)
        default = None if p.default is inspect.Parameter.empty else p.default
        out.append({"name": p.name, "allowed": c.describe() if c is not None else "any",
                    "default": default.tolist() if isinstance(default, np.ndarray) else default})
        if p.name in words:
            out[-1]["default_words"] = words[p.name]
    return out
