"""Header fields declared as tables, read and written by one routine for every layout.

A table is a tuple of ``(name, bits, meaning)``.  ``bits`` is an int, or a
function ``bits(fields, ctx)`` of the fields before it (already read, or
about to be written) and the layout's context: so a field that is present
only under a flag (a channel field only when ``multi`` is 0) or whose width
depends on another (an 11- or 27-bit length) is still one row of the table.
Values are whole arrays, one entry per frame.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

__all__ = ["FieldTable", "field_widths", "read_header", "header_slots", "header_bits"]

FieldTable = tuple[tuple[str, "int | Callable[[Mapping, Any], np.ndarray]", str], ...]


def _width(bits, fields: Mapping, ctx, size: int) -> np.ndarray:
    w = bits if isinstance(bits, int) else bits(fields, ctx)
    return np.broadcast_to(np.asarray(w, dtype=np.int64), (size,))


def field_widths(table: FieldTable, fields: Mapping, ctx, size: int) -> dict[str, np.ndarray]:
    """Width of every field of ``table`` for frames with these ``fields`` (one per frame)."""
    return {name: _width(bits, fields, ctx, size) for name, bits, _ in table}


def read_header(reader, pos: np.ndarray, table: FieldTable, ctx=None
                ) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Read the fields of ``table`` from bit positions ``pos`` (one per frame), in order.

    ``reader.read(pos, width)`` returns unsigned MSB-first fields (width 0
    reads 0).  Returns the fields by name and the positions after them.
    """
    pos = np.asarray(pos, dtype=np.int64)
    fields: dict[str, np.ndarray] = {}
    for name, bits, _ in table:
        w = _width(bits, fields, ctx, pos.size)
        fields[name] = reader.read(pos, w)
        pos = pos + w
    return fields, pos


def header_slots(table: FieldTable, fields: Mapping, ctx, size: int) -> list[tuple]:
    """``(value, width)`` per field of ``table``, in order; a value is 0 where its width is 0."""
    out = []
    for name, bits, _ in table:
        w = _width(bits, fields, ctx, size)
        v = np.broadcast_to(np.asarray(fields[name], dtype=np.int64), (size,))
        out.append((np.where(w > 0, v, 0), w))
    return out


def header_bits(table: FieldTable, fields: Mapping, ctx, size: int,
                skip: tuple[str, ...] = ()) -> np.ndarray:
    """Bits the fields of ``table`` take, leaving out the fields named in ``skip``."""
    total = np.zeros(size, dtype=np.int64)
    for name, bits, _ in table:
        if name not in skip:
            total = total + _width(bits, fields, ctx, size)
    return total
