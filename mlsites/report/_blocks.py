"""The pieces a report section is made of, and the number formats they use.

A section is a dict ``{"id", "title", "blocks", "absent"}``; blocks are small
dicts the template renders by their ``kind``: a paragraph, a table, a figure, a
row of figures, a list or a boxed note. Text is escaped by the template.
"""

from __future__ import annotations

import math

__all__ = ["section", "absent", "para", "table", "figure", "figures", "row", "items", "note", "pct", "num", "mean_sd",
           "share_ci", "share_sd"]


def section(sid, title, blocks):
    return {"id": sid, "title": title, "blocks": [b for b in blocks if b], "absent": None}


def absent(sid, title, why):
    """A section left out, with the one line saying why."""
    return {"id": sid, "title": title, "blocks": [], "absent": why}


def para(text):
    return {"kind": "p", "text": text}


def table(columns, rows, *, caption="", numeric=None):
    """A table; ``numeric`` flags right-aligned columns (default: all but the first)."""
    numeric = [i > 0 for i in range(len(columns))] if numeric is None else list(numeric)
    return {"kind": "table", "columns": list(columns), "rows": [list(r) for r in rows], "caption": caption,
            "numeric": numeric}


def figure(src, *, alt, caption="", wide=False):
    return {"kind": "figure", "src": src, "alt": alt, "caption": caption, "wide": wide}


def figures(figs):
    figs = [f for f in figs if f]
    return {"kind": "figures", "items": figs} if figs else None


def row(blocks):
    """Blocks side by side (wrapping on narrow screens)."""
    blocks = [b for b in blocks if b]
    return {"kind": "row", "items": blocks} if blocks else None


def items(lines):
    return {"kind": "list", "items": list(lines)} if lines else None


def note(text):
    return {"kind": "note", "text": text}


def _finite(x):
    try:
        return x is not None and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def pct(x, digits=1):
    """A share as a percentage ("70.2 %"); empty for NaN."""
    return f"{100.0 * float(x):.{digits}f} %" if _finite(x) else ""


def num(x, digits=3):
    """A number with ``digits`` decimals; empty for NaN."""
    return f"{float(x):.{digits}f}" if _finite(x) else ""


def mean_sd(mean, sd, digits=3):
    """"0.834 ± 0.016" (the sd left out when missing)."""
    if not _finite(mean):
        return ""
    return f"{float(mean):.{digits}f} ± {float(sd):.{digits}f}" if _finite(sd) else f"{float(mean):.{digits}f}"


def share_sd(mean, sd, digits=1):
    """"75.3 % ± 3.7" (a share and its sd, in percentage points)."""
    if not _finite(mean):
        return ""
    return f"{100 * float(mean):.{digits}f} % ± {100 * float(sd):.{digits}f}" if _finite(sd) else pct(mean, digits)


def share_ci(share, low, high, digits=1):
    """"70.2 % (63.8–76.0)"."""
    if not _finite(share):
        return ""
    if _finite(low) and _finite(high):
        return f"{100 * float(share):.{digits}f} % ({100 * float(low):.{digits}f}–{100 * float(high):.{digits}f})"
    return pct(share, digits)
