"""Escaping and number formats of the HTML report."""

from __future__ import annotations

import hashlib
import html
import math

from pitchguard.deck import LayerRule
from pitchguard.outputs.texts import SHOWN_CHARS, shown, shown_path


def esc(text) -> str:
    """Text content (quotes stay readable)."""
    return html.escape(str(text), quote=False)


def attr_text(text) -> str:
    """An attribute value (quotes escaped too)."""
    return html.escape(str(text), quote=True)


def name_html(text) -> str:
    """A user's name (cell, layer, exposure, deck) as the page shows it: cut to
    :data:`~pitchguard.outputs.texts.SHOWN_CHARS`, control characters written out."""
    return esc(shown(text))


def path_html(path) -> str:
    """A path as the page shows it (cut in the middle when very long)."""
    return esc(shown_path(path))


def filter_key(name: str) -> str:
    """The value that stands for a layer in the filter bar and its links: the name
    itself, or for a very long name its start and a hash (equal names, equal keys)."""
    name = str(name)
    if len(name) <= SHOWN_CHARS:
        return name
    digest = hashlib.blake2b(name.encode("utf-8", "surrogatepass"), digest_size=6).hexdigest()
    return f"{name[: SHOWN_CHARS - 14]}…{digest}"


def html_number(v: float, fmt: str = ".1f", unit: str = "") -> str:
    if v is None or not math.isfinite(v):
        return "&ndash;"
    return f"{v:{fmt}}{unit}"


def value_vs_limit(check: str, value: float, limit: float) -> str:
    """A violation's value against its limit, in words a designer reads."""
    forms = {
        "unresolvable-pitch": lambda v, lim: (
            f"pitch {v:.1f} nm &lt; smallest imageable {lim:.1f} nm"
        ),
        "low-k1": lambda v, lim: f"k1 {v:.3f} &lt; {lim:g}",
        "feature-not-printed": lambda v, lim: f"image contrast {v:.3f}; no threshold crossing",
        "features-bridged": lambda v, lim: f"image contrast {v:.3f}; printed into neighbour",
        "low-nils": lambda v, lim: f"NILS {v:.2f} &lt; {lim:g}",
        "low-exposure-latitude": lambda v, lim: f"EL {v:.1f} % &lt; {lim:g} %",
        "low-depth-of-focus": lambda v, lim: f"DOF {v:.0f} nm &lt; {lim:.0f} nm",
        "cd-error": lambda v, lim: f"CD error {v:+.1f} % outside ±{lim:g} %",
        "line-end-bridged": lambda v, lim: f"closes at {v:.0f} nm defocus, within ±{lim:.0f} nm",
        "line-end-pullback": lambda v, lim: f"pullback {v:.1f} nm &gt; {lim:.1f} nm",
    }
    if check == "line-end-bridged" and not math.isfinite(limit):
        return f"{value:.1f} nm gap closed at best focus"
    if not (math.isfinite(value) and math.isfinite(limit)):
        return f"{esc(value)} against {esc(limit)}"
    form = forms.get(check)
    return form(value, limit) if form else f"{value:.4g} against {limit:.4g}"


def feature_word(rule: LayerRule | None) -> str:
    return "opening" if rule is not None and rule.field == "dark" else "line"
