"""Commented TOML through tomlkit: ``key = value  # comment`` lines, table headers and comment lines.

A file is a list of parts (:data:`Part`): key-value pairs with a comment
(``_kv``), table headers ``[name]`` or ``[[name]]`` with a comment
(``_table``), comment lines (``"# ..."``) and blank lines (``""``);
``_document`` turns them into one tomlkit document, the comments starting at
one column where the values leave room.  Floats are written to 10
significant digits, so a file shows 0.04, not 0.04000000001
(:func:`toml_value`).  The starter rig files
(:mod:`arrayplan.rig.starter`) are written this way.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import tomlkit

__all__ = ["Part", "toml_value"]

#: Column at which the comment after a value or table header starts (as far as the value leaves room).
_COMMENT_COLUMN = 34


@dataclass(frozen=True)
class _Pair:
    """``key = value  # comment`` in a starter file."""

    key: str
    value: Any
    comment: str


@dataclass(frozen=True)
class _Head:
    """A table header ``[name]`` (or ``[[name]]``) with its comment."""

    name: str
    comment: str
    array: bool = False


#: One part of a starter file: a pair, a table header, a comment line ("# ...") or a blank line ("").
Part = Any


def _tidy(v: Any) -> Any:
    """`v` with floats rounded to 10 significant digits (and 1e-9), so the file shows 0.04, not 0.04000000001."""
    if isinstance(v, float):
        return float(f"{round(v, 9):.10g}")
    if isinstance(v, (list, tuple)):
        return [_tidy(x) for x in v]
    if isinstance(v, dict):
        return {k: _tidy(x) for k, x in v.items()}
    return v


def _item(value: Any) -> Any:
    """A tomlkit item of `value`; dicts (also inside lists and dicts) become inline tables ``{k = v}``."""
    value = _tidy(value)
    if isinstance(value, dict):
        table = tomlkit.inline_table()
        for k, x in value.items():
            table.append(k, _item(x))
        return table
    if isinstance(value, list) and any(isinstance(x, (dict, list)) for x in value):
        array = tomlkit.array()
        for x in value:
            array.append(_item(x))
        return array
    return tomlkit.item(value)


def toml_value(value: Any) -> str:
    """`value` (number, bool, string, list or dict) as TOML text, floats to 10 significant digits.

    Parameters
    ----------
    value : Any
        What to write; dicts become inline tables.

    Returns
    -------
    str
        The value's TOML text (``0.04``, ``[1.0, 2.0]``, ``{type = "omni"}``).
    """
    return _item(value).as_string()


def _commented(item: Any, text: str, comment: str) -> Any:
    """`item` with `comment` after it, starting at :data:`_COMMENT_COLUMN` where `text` leaves room."""
    item.comment(comment)
    item.trivia.comment_ws = " " * max(1, _COMMENT_COLUMN - len(text))
    return item


def _kv(key: str, value: Any, comment: str) -> _Pair:
    return _Pair(key, value, comment)


def _table(name: str, comment: str, array: bool = False) -> _Head:
    return _Head(name, comment, array)


def _document(parts: list[Part]) -> tomlkit.TOMLDocument:
    """The tomlkit document of a starter file's parts, in order."""
    doc = tomlkit.document()
    container: Any = doc
    arrays: dict[str, Any] = {}
    for i, part in enumerate(parts):
        following = parts[i + 1] if i + 1 < len(parts) else None
        if part == "" and isinstance(following, _Head) and following.name in arrays:
            continue    # tomlkit puts a blank line between the tables of an array itself
        if isinstance(part, _Head):
            container = _commented(tomlkit.table(), f"[[{part.name}]]" if part.array else f"[{part.name}]",
                                   part.comment)
            if part.array:
                if part.name not in arrays:
                    arrays[part.name] = tomlkit.aot()
                    doc.append(part.name, arrays[part.name])
                arrays[part.name].append(container)
            else:
                doc.append(part.name, container)
        elif isinstance(part, _Pair):
            item = _item(part.value)
            container.add(part.key, _commented(item, f"{part.key} = {item.as_string()}", part.comment))
        elif part == "":
            container.add(tomlkit.nl())
        else:
            container.add(tomlkit.comment(part.removeprefix("#").removeprefix(" ")))
    return doc
