"""Typed fields of TOML tables, with problems that name the file and the field.

One reader serves every TOML file arrayplan reads (rig files, calibration
records).  It works in two modes:

* fail-fast (the default): the first problem raises :class:`InputError`;
* collecting (``collect=True``): a problem in a field that has a fallback
  (an optional key, or a check the caller marks with :meth:`FieldReader.reject`
  or :meth:`FieldReader.recover`) is recorded and the fallback is used, so one
  pass finds every such problem.  A problem without a fallback (a required
  key) still raises.  :meth:`FieldReader.take` hands over what was recorded.
"""

from __future__ import annotations

import math
from typing import Any, Callable, Mapping, TypeVar

from ..errors import InputError

__all__ = ["FieldReader", "MISSING"]

#: Marks a field without a default: it is required.
MISSING: Any = ...

T = TypeVar("T")


class FieldReader:
    """Typed access to TOML tables; errors name the file and ``"<where>.<key>"``.

    Parameters
    ----------
    source : str
        The file the tables come from (named in every error).
    collect : bool
        Record recoverable problems instead of raising them (see the module notes).
    number_range : (float, float)
        Default accepted range of :meth:`number` and magnitude bound of
        :meth:`vector` (the upper end), in the field's own unit.
    ranges : mapping of str to (float, float), optional
        Accepted range per key name, overriding `number_range` for that key.
    integer_max : int
        Default upper bound of :meth:`integer`.
    """

    def __init__(self, source: str, *, collect: bool = False,
                 number_range: tuple[float, float] = (-math.inf, math.inf),
                 ranges: Mapping[str, tuple[float, float]] | None = None, integer_max: int = 2**31 - 1) -> None:
        self.source = source
        self.collect = collect
        self.number_range = number_range
        self.ranges = dict(ranges or {})
        self.integer_max = integer_max
        self.problems: list[InputError] = []

    # ----------------------------------------------------------- problems

    def fail(self, field: str, problem: str, fix: str | None = None) -> InputError:
        """The error for `field` (to raise).

        Parameters
        ----------
        field : str
            The field path, ``"<where>.<key>"``.
        problem : str
            What is wrong, in words.
        fix : str, optional
            How to mend it.

        Returns
        -------
        InputError
            Naming :attr:`source` and `field`; the caller raises it.
        """
        return InputError(problem, source=self.source, field=field, fix=fix)

    def reject(self, field: str, problem: str, fallback: T, fix: str | None = None) -> T:
        """A problem the reading can go on from: raise it, or record it and return `fallback`.

        Parameters
        ----------
        field, problem, fix
            As for :meth:`fail`.
        fallback : object
            The value the reading goes on with when collecting.

        Returns
        -------
        object
            `fallback` (when collecting; otherwise the problem is raised).
        """
        return self._recoverable(self.fail(field, problem, fix), fallback)

    def recover(self, read: Callable[[], T], fallback: T) -> T:
        """``read()``; when collecting, an InputError it raises is recorded and `fallback` returned.

        Parameters
        ----------
        read : callable
            Reads one value (without arguments); may raise :class:`InputError`.
        fallback : object
            The value the reading goes on with when `read` fails while collecting.

        Returns
        -------
        object
            What `read` returned, or `fallback`.
        """
        try:
            return read()
        except InputError as exc:
            return self._recoverable(exc, fallback)

    def take(self) -> list[InputError]:
        """Hand over the problems recorded so far; the record is emptied.

        Returns
        -------
        list of InputError
            In the order met; empty in fail-fast mode.
        """
        out, self.problems = self.problems, []
        return out

    def _recoverable(self, exc: InputError, fallback: T) -> T:
        if not self.collect:
            raise exc
        self.problems.append(exc)
        return fallback

    def _bad(self, field: str, problem: str, default: Any, fix: str | None = None) -> Any:
        if default is MISSING:
            raise self.fail(field, problem, fix)
        return self.reject(field, problem, default, fix)

    def _lookup(self, table: dict, key: str, field: str, default: Any, fix: str | None) -> tuple[bool, Any]:
        """``(True, value)`` when `key` is in `table`, ``(False, default)`` when absent; "missing" when required."""
        if key in table:
            return True, table[key]
        if default is MISSING:
            raise self.fail(field, "missing", fix=fix)
        return False, default

    @staticmethod
    def _field(where: str, key: str) -> str:
        return f"{where}.{key}" if where else key

    # ----------------------------------------------------------- typed values

    def number(self, table: dict, key: str, where: str, default: Any = MISSING, positive: bool = False,
               low: float | None = None, high: float | None = None) -> float:
        """A finite number in ``[low, high]`` (above 0 with `positive`).

        Parameters
        ----------
        table : dict
            The TOML table.
        key : str
            The key in `table`.
        where : str
            The table's field path ("" at the top level).
        default : optional
            Returned when `key` is absent, and when collecting also in place
            of a bad value; without it the key is required.
        positive : bool
            Require a value above 0.
        low, high : float, optional
            Accepted range; by default the range of `key` in `ranges`, else `number_range`.

        Returns
        -------
        float
            The value as a float, or `default`.
        """
        field = self._field(where, key)
        found, v = self._lookup(table, key, field, default, f"add {key} = <number>")
        if not found:
            return v
        lo, hi = self.ranges.get(key, self.number_range)
        lo, hi = lo if low is None else low, hi if high is None else high
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            return self._bad(field, f"expected a finite number, got {v!r}", default)
        if positive and v <= 0:
            return self._bad(field, f"must be positive, got {v!r}", default)
        if not lo <= v <= hi:
            return self._bad(field, f"must be between {lo:g} and {hi:g}, got {v!r}", default)
        return float(v)

    def integer(self, table: dict, key: str, where: str, default: Any = MISSING, minimum: int = 1,
                maximum: int | None = None) -> int:
        """A whole number in ``[minimum, maximum]``.

        Parameters
        ----------
        table, key, where, default
            As for :meth:`number`.
        minimum : int
            Smallest value accepted.
        maximum : int, optional
            Largest value accepted; by default `integer_max`.

        Returns
        -------
        int
            The value, or `default`.
        """
        field = self._field(where, key)
        found, v = self._lookup(table, key, field, default, f"add {key} = <whole number>")
        if not found:
            return v
        top = self.integer_max if maximum is None else maximum
        if isinstance(v, bool) or not isinstance(v, int) or v < minimum:
            return self._bad(field, f"expected a whole number >= {minimum}, got {v!r}", default)
        if v > top:
            return self._bad(field, f"{v} is above the limit of {top}", default)
        return int(v)

    def vector(self, table: dict, key: str, where: str, n: int = 3, default: Any = MISSING) -> tuple:
        """`n` finite numbers, each at most the upper end of `number_range` in magnitude.

        Parameters
        ----------
        table, key, where, default
            As for :meth:`number`.
        n : int
            How many numbers (3 for a position in metres).

        Returns
        -------
        tuple of float
            The values, one per component, or `default`.
        """
        field = self._field(where, key)
        found, v = self._lookup(table, key, field, default, f"add {key} = [{', '.join(['0'] * n)}]")
        if not found:
            return v
        ok = (isinstance(v, list) and len(v) == n
              and all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in v))
        if not ok:
            return self._bad(field, f"expected {n} finite numbers, got {v!r}", default)
        bound = self.number_range[1]
        if any(abs(x) > bound for x in v):
            return self._bad(field, f"values must be at most {bound:g} in magnitude, got {v!r}", default)
        return tuple(float(x) for x in v)

    def string(self, table: dict, key: str, where: str, default: Any = MISSING, allow_empty: bool = False) -> str:
        """A string (non-empty unless `allow_empty`).

        Parameters
        ----------
        table, key, where, default
            As for :meth:`number`.
        allow_empty : bool
            Accept ``""``.

        Returns
        -------
        str
            The string as written (not stripped), or `default`.
        """
        field = self._field(where, key)
        found, v = self._lookup(table, key, field, default, None)
        if not found:
            return v
        if not isinstance(v, str) or not (v or allow_empty):
            kind = "a string" if allow_empty else "a non-empty string"
            return self._bad(field, f"expected {kind}, got {v!r}", default)
        return v

    def boolean(self, table: dict, key: str, where: str, default: Any = MISSING) -> bool:
        """``true`` or ``false``.

        Parameters
        ----------
        table, key, where, default
            As for :meth:`number`.

        Returns
        -------
        bool
            ``True`` or ``False``, or `default`.
        """
        field = self._field(where, key)
        found, v = self._lookup(table, key, field, default, f"add {key} = true (or false)")
        if not found:
            return v
        if not isinstance(v, bool):
            return self._bad(field, f"expected true or false, got {v!r}", default)
        return v

    def keys(self, table: dict, allowed: set[str], where: str) -> None:
        """Refuse keys of `table` outside `allowed` (recorded when collecting).

        Parameters
        ----------
        table : dict
            The TOML table.
        allowed : set of str
            The keys it may hold.
        where : str
            The table's field path ("" at the top level), named in the problem.
        """
        unknown = sorted(set(table) - allowed)
        if unknown:
            self.reject(where, f"unknown key(s) {', '.join(unknown)}", None,
                        fix=f"allowed here: {', '.join(sorted(allowed))}")
