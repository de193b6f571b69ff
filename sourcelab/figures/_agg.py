"""An Agg canvas that rasterises each distinct string once per process.

Matplotlib 3.11 shapes every string (libraqm) and renders and blends it glyph by glyph at every
draw; most of a label-heavy figure's drawing time goes there (measured on the demo's figure set:
~7 ms per tick label).  A figure set repeats most of its strings (tick values, electrode and
area names, band names, colour-bar labels), so :class:`TextCacheRenderer` keeps, per string,
font, size, angle and resolution, the string's glyphs composed into one coverage bitmap, and
blends that bitmap once at the string's position rounded to a whole pixel (what matplotlib up
to 3.10 did for every string; 3.11 places glyphs at sub-pixel positions, so pixels differ by
at most a half-pixel shift of a string).  Text metrics are kept across figures the same way.

Used by :func:`sourcelab.figures.figure_set.figure_png`; any other matplotlib version, math
text, or a renderer without the 3.11 glyph interface draws through matplotlib unchanged.
"""

from __future__ import annotations

import functools
import math
from collections import OrderedDict

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg, get_hinting_flag

#: Most strings kept (bitmaps of a few hundred bytes to a few kB each).
CACHE_SIZE = 8192

_bitmaps: OrderedDict = OrderedDict()
_metrics: dict = {}


@functools.lru_cache(maxsize=1)
def supported() -> bool:
    """True when this matplotlib draws text glyph by glyph (the 3.11 interface this uses).

    Returns
    -------
    bool
    """
    from matplotlib.ft2font import FT2Font

    return hasattr(RendererAgg, "_draw_text_glyphs_and_boxes") and all(
        hasattr(FT2Font, n) for n in ("_layout", "_render_glyph", "_set_transform")
    )


def _glyph_bitmap(font, size, dpi, index, flags, cos, sin, dx, dy, mode):
    """One glyph rendered about the origin: (coverage uint8 array, left, top), y upwards."""
    font.set_size(size, dpi)
    font._set_transform(
        (0x10000 * np.array([[cos, -sin], [sin, cos]])).round().astype(int),
        [round(0x40 * (dx * cos - dy * sin)), round(0x40 * (dx * sin + dy * cos))],
    )
    bitmap = font._render_glyph(index, flags, mode)
    return np.array(bitmap.buffer, dtype=np.uint8), bitmap.left, bitmap.top


class TextCacheRenderer(RendererAgg):
    """:class:`~matplotlib.backends.backend_agg.RendererAgg` with per-process caches of text
    bitmaps and metrics (see the module notes)."""

    def get_text_width_height_descent(self, s, prop, ismath):
        if ismath:
            return super().get_text_width_height_descent(s, prop, ismath)
        key = (s, prop.copy(), self.dpi, get_hinting_flag())
        out = _metrics.get(key)
        if out is None:
            if len(_metrics) >= CACHE_SIZE:
                _metrics.clear()
            out = _metrics[key] = super().get_text_width_height_descent(s, prop, ismath)
        return out

    def draw_text(self, gc, x, y, s, prop, angle, ismath=False, mtext=None):
        if ismath:
            return super().draw_text(gc, x, y, s, prop, angle, ismath=ismath, mtext=mtext)
        features = mtext.get_fontfeatures() if mtext is not None else None
        language = mtext.get_language() if mtext is not None else None
        aa = bool(gc.get_antialiased())
        key = (
            s,
            prop.copy(),
            self.dpi,
            float(angle),
            aa,
            tuple(features) if features is not None else None,
            language if isinstance(language, (str, type(None))) else repr(language),
            get_hinting_flag(),
        )
        hit = _bitmaps.get(key)
        if hit is None:
            hit = self._rasterise(s, prop, angle, aa, features, language)
            _bitmaps[key] = hit
            if len(_bitmaps) > CACHE_SIZE:
                _bitmaps.popitem(last=False)
        buf, left, top = hit
        if buf is None:
            return
        # draw_text_image takes the bitmap's bottom edge, y downwards
        x0 = round(x) + left
        y_up = round(self.height - y) + top
        self._renderer.draw_text_image(buf, x0, int(self.height) - y_up + buf.shape[0], 0, gc)

    def _rasterise(self, s, prop, angle, aa, features, language):
        """The string's glyphs about its origin composed into one coverage bitmap:
        (bitmap or None when nothing is inked, left, top), pixels, y upwards."""
        from matplotlib.ft2font import RenderMode

        font = self._prepare_font(prop)
        flags = get_hinting_flag()
        items = font._layout(s, flags=flags, features=features, language=language)
        size = prop.get_size_in_points()
        cos, sin = math.cos(math.radians(angle)), math.sin(math.radians(angle))
        mode = RenderMode.NORMAL if aa else RenderMode.MONO
        glyphs = [
            _glyph_bitmap(
                it.ft_object, size, self.dpi, it.glyph_index, flags, cos, sin, it.x, it.y, mode
            )
            for it in items
        ]
        glyphs = [(b if aa else b * np.uint8(0xFF), x0, t) for b, x0, t in glyphs if b.size]
        if not glyphs:
            return None, 0, 0
        left = min(x0 for _, x0, _ in glyphs)
        right = max(x0 + b.shape[1] for b, x0, _ in glyphs)
        top = max(t for _, _, t in glyphs)
        bottom = min(t - b.shape[0] for b, _, t in glyphs)
        out = np.zeros((top - bottom, right - left), dtype=np.uint8)
        for b, x0, t in glyphs:
            r0, c0 = top - t, x0 - left
            view = out[r0 : r0 + b.shape[0], c0 : c0 + b.shape[1]]
            np.maximum(view, b, out=view)
        return out, left, top


class TextCacheCanvas(FigureCanvasAgg):
    """Agg canvas drawing with :class:`TextCacheRenderer`."""

    def get_renderer(self):
        w, h = self.get_width_height(physical=True)
        key = w, h, self.figure.dpi
        if self._lastKey != key:
            self.renderer = TextCacheRenderer(w, h, self.figure.dpi)
            self._lastKey = key
        return self.renderer
