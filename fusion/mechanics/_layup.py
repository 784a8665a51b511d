"""The trade's compact layup codes, e.g. ``"[45/0/-45/90]s"``, ``"[0/90]2s"``, ``"[±45]s"``.

Conventions (common practice in composites laboratories): angles listed from the
viewed face inward and separated by ``/``; ``±a`` (or ``+-a``) stands for ``a/-a`` and
``∓a`` for ``-a/a``; a subscript count after an angle repeats it, written with an underscore
(``90_2`` is 90/90); a count after the bracket repeats the group
(``[0/90]2``); ``s`` mirrors the whole sequence (``[0/90]2s`` is
0/90/0/90/90/0/90/0); a trailing ``T`` (total) is allowed and means no mirror.
Mid-plane-ply symmetric codes (overlined last ply) are not supported: list such
layups explicitly.
"""

from __future__ import annotations

import re

__all__ = ["parse_layup", "LayupError"]


class LayupError(ValueError):
    """The layup code could not be read; the message says where."""


_TOKEN = re.compile(r"^(?P<sign>±|\+-|-\+|∓|\+|-)?(?P<angle>\d+(?:\.\d+)?)(?:_(?P<count>\d+))?$")
_CODE = re.compile(r"^\[(?P<body>[^\[\]]+)\](?P<count>\d+)?(?P<sym>s)?(?P<total>t)?$", re.IGNORECASE)


def parse_layup(layup) -> tuple[float, ...]:
    """Expand a layup code or list into ply angles in degrees, viewed face first.

    Parameters
    ----------
    layup : str or sequence of float
        ``"[45/0/-45/90]s"`` style code, or an explicit list of angles in degrees.

    Returns
    -------
    tuple of float
        Ply angles in degrees, from the viewed face inward.

    Raises
    ------
    LayupError
        For an unreadable code or an empty layup.

    Examples
    --------
    >>> parse_layup("[0/90]2s")
    (0.0, 90.0, 0.0, 90.0, 90.0, 0.0, 90.0, 0.0)
    >>> parse_layup("[±45]s")
    (45.0, -45.0, -45.0, 45.0)
    """
    if isinstance(layup, str):
        angles = _parse_code(layup)
    else:
        try:
            angles = [float(a) for a in layup]
        except (TypeError, ValueError) as e:
            raise LayupError(f"expected a code such as '[0/90]s' or a list of angles in degrees, "
                             f"got {layup!r}") from e
        if any(isinstance(a, bool) for a in layup):
            raise LayupError(f"angles must be numbers, got {layup!r}")
    if not angles:
        raise LayupError("the layup has no plies")
    for a in angles:
        if not (-180.0 <= a <= 180.0):
            raise LayupError(f"ply angle {a!r} deg is outside -180..180")
    return tuple(float(a) for a in angles)


def _parse_code(code: str) -> list[float]:
    text = code.strip().replace(" ", "")
    m = _CODE.match(text)
    if not m:
        raise LayupError(f"cannot read layup code {code!r}: expected e.g. '[45/0/-45/90]s', "
                         "'[0/90]2s' or '[±45]s'")
    group: list[float] = []
    for raw in m["body"].split("/"):
        t = _TOKEN.match(raw)
        if not t:
            raise LayupError(f"cannot read ply {raw!r} in layup code {code!r}: expected an angle "
                             "such as 45, -45, ±45 or 0_2")
        angle = float(t["angle"])
        count = int(t["count"]) if t["count"] else 1
        if count < 1:
            raise LayupError(f"repeat count 0 in ply {raw!r} of layup code {code!r}")
        sign = t["sign"] or ""
        if sign in ("±", "+-"):
            unit = [angle, -angle]
        elif sign in ("∓", "-+"):
            unit = [-angle, angle]
        elif sign == "-":
            unit = [-angle]
        else:
            unit = [angle]
        group.extend(unit * count)
    repeats = int(m["count"]) if m["count"] else 1
    if repeats < 1:
        raise LayupError(f"group repeat count 0 in layup code {code!r}")
    if m["sym"] and m["total"]:
        raise LayupError(f"layup code {code!r} cannot be both symmetric (s) and total (T)")
    seq = group * repeats
    if m["sym"]:
        seq = seq + seq[::-1]
    return seq
