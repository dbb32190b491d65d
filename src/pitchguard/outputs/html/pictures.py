"""The HTML report's two pictures per finding, with the caches a report shares between them."""

from __future__ import annotations

import numpy as np

from pitchguard.deck import Deck, LayerRule
from pitchguard.judge.findings import CLIP_KINDS, Finding
from pitchguard.outputs.html.image_picture import draw_image
from pitchguard.outputs.html.layout_picture import CutPicture, draw_layout
from pitchguard.run.scan import ScanResult


class FindingPictures:
    """Pictures for findings, with per-layer and per-cut caches."""

    def __init__(self, result: ScanResult, deck: Deck):
        self.result = result
        self.deck = deck
        self.scale = deck.scale_to_wafer
        self.rules = {r.name: r for r in deck.layers}
        self._bboxes: dict[tuple[int, int], np.ndarray] = {}
        self._images: dict[tuple, tuple[np.ndarray, np.ndarray, np.ndarray | None]] = {}

    def _layer(self, rule: LayerRule):
        lay = self.result.layout
        if lay is None:
            return None, None
        key = (rule.layer, rule.datatype)
        ps = lay.layers.get(key)
        if ps is None or len(ps) == 0:
            return None, None
        if key not in self._bboxes:
            self._bboxes[key] = ps.bounding_boxes()
        return ps, self._bboxes[key]

    def layout_picture(self, f: Finding) -> tuple[str | None, str, CutPicture]:
        """PNG (base64) of the layout around ``f``, a caption, and the cut's orientation."""
        rule = self.rules.get(f.layer)
        if rule is None:
            return None, "The deck has no layer of this name: no picture.", CutPicture()
        ps, boxes = self._layer(rule)
        if ps is None:
            return None, "Layout geometry is not available for this layer.", CutPicture()
        return draw_layout(f, rule, ps, boxes, self.scale)

    def image(self, f: Finding, rule: LayerRule):
        """Best-focus image and the image at the edge of the focus range (cached per cut)."""
        from pitchguard.optics.cut_images import cut_image

        key = (rule.name, tuple(f.cut_bounds_nm), round(f.cut_angle_deg % 180.0, 1))
        hit = self._images.get(key)
        if hit is None:
            x, i0 = cut_image(rule, f.cut_bounds_nm, f.cut_angle_deg, 0.0)
            i_def = None
            if rule.focus_half_range_nm > 0 and len(rule.focus_nm) > 1:
                _, i_def = cut_image(
                    rule, f.cut_bounds_nm, f.cut_angle_deg, rule.focus_half_range_nm
                )
            hit = self._images[key] = (np.asarray(x), np.asarray(i0), i_def)
        return hit

    def image_picture(self, f: Finding, mirrored: bool) -> tuple[str | None, str]:
        """PNG (base64) of the aerial image across ``f``'s cut and a caption."""
        rule = self.rules.get(f.layer)
        if rule is not None and f.array is not None and f.array.lattice in CLIP_KINDS:
            from pitchguard.outputs.html.tip_picture import alone_picture

            return alone_picture(f, rule, *self._layer(rule), self.scale)
        if rule is not None and f.array is not None:
            from pitchguard.outputs.html.array_picture import array_picture

            return array_picture(f, rule, self.scale)
        if rule is not None and f.tip is not None:
            from pitchguard.outputs.html.tip_picture import tip_picture

            return tip_picture(f, rule, self.scale)
        if rule is None or not f.cut_bounds_nm:
            return None, (
                "Not imaged (image checks off for this layer, or the site has no "
                "finite width): judged by diffraction orders and k1 only."
            )
        x, inten, i_def = self.image(f, rule)
        return draw_image(f, rule, x, inten, i_def, mirrored, self.scale)


def cut_mirrored(result: ScanResult, deck: Deck, f: Finding) -> bool:
    """Whether ``f``'s stored (canonical) cut runs against the arrow drawn in its picture."""
    return FindingPictures(result, deck).layout_picture(f)[2].mirrored
