"""Conventions shared by every public function: masks, renamed keywords, short printouts.

* A mask is a boolean array; integer or float arrays holding only 0/1 or 0/255 (what an
  image reader returns for a painted mask) are taken as masks too, nothing else is.
* Image positions are (x, y) = (column, row) everywhere; a keyword that once took
  (row, column) gives way to a new name and warns for one release.
* Records of arrays print their shapes, not their values.
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np

__all__ = ["as_mask", "renamed_keyword", "short_repr"]


def as_mask(value, name, *, shape=None) -> np.ndarray:
    """``value`` as a boolean mask: bool, or numbers holding only 0/1 or only 0/255.

    Raises
    ------
    ValueError
        Any other values (a grey image, NaN), or a shape other than ``shape``; the message
        names ``name``.
    """
    arr = np.asarray(value)
    if arr.dtype != bool:
        if arr.dtype.kind not in "iuf":
            raise TypeError(f"{name}: expected a boolean mask (or 0/1, 0/255 numbers), got dtype {arr.dtype!r}")
        levels = np.unique(arr)
        if not (set(levels.tolist()) <= {0, 1} or set(levels.tolist()) <= {0, 255}):
            shown = ", ".join(f"{v:g}" for v in levels[:6]) + (", ..." if levels.size > 6 else "")
            raise ValueError(f"{name}: a mask holds True/False, 0/1 or 0/255; got the values {shown}: "
                             f"threshold it first (e.g. {name} > 127)")
        arr = arr != 0
    if shape is not None and arr.shape != tuple(shape):
        raise ValueError(f"{name}: a mask must have the image shape {tuple(shape)!r}, got {arr.shape!r}")
    return arr.copy()


def renamed_keyword(old: str, new: str, how: str = "", *, stacklevel: int = 3) -> None:
    """Warn that keyword ``old`` gave way to ``new`` (kept for one release)."""
    warnings.warn(f"{old}= is deprecated and will be removed in the next release; use {new}= instead"
                  + (f" ({how})" if how else ""), DeprecationWarning, stacklevel=stacklevel)


def _brief(value, depth=0) -> str:
    if isinstance(value, np.ndarray):
        return f"<array {value.shape} {value.dtype}>" if value.size > 4 else repr(value.tolist())
    if hasattr(value, "shape") and hasattr(value, "dtype"):
        return f"<{type(value).__name__} {tuple(value.shape)} {value.dtype}>"
    if isinstance(value, dict):
        if depth or len(value) > 6:
            return f"<dict of {len(value)}: {', '.join(map(str, list(value)[:6]))}{', ...' if len(value) > 6 else ''}>"
        return "{" + ", ".join(f"{k!r}: {_brief(v, depth + 1)}" for k, v in value.items()) + "}"
    if isinstance(value, (list, tuple)) and len(value) > 6:
        return f"<{type(value).__name__} of {len(value)}>"
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def short_repr(self) -> str:
    """A dataclass printed with its arrays as shapes and dtypes (one line per field)."""
    parts = [f"    {f.name}={_brief(getattr(self, f.name))}," for f in dataclasses.fields(self) if f.repr]
    return f"{type(self).__name__}(\n" + "\n".join(parts) + "\n)"
