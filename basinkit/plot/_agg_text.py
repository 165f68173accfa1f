"""Agg drawing with the text work done once per process: the fonts a text's properties
resolve to, the glyph layout of each string, and each glyph's bitmap are kept and reused,
so that the same pixels come out as from matplotlib's own Agg renderer, faster.

A job draws the same kinds of figure for many outlets: the same tick labels, axis labels
and title words, in the same fonts and sizes, most of them at the same places. Drawing a
text in matplotlib's Agg renderer finds its font (going through the font lists of the
settings at every call), lays the string out glyph by glyph (kerning, fallback fonts) and
renders every glyph with FreeType at its position. Here:

- the font files of a text's properties are found once per properties and font settings,
  and a string's size (width, height, descent) measured once per string, properties,
  resolution and settings (matplotlib keeps it per renderer, that is per figure);
- the layout of a string is kept per font, size, resolution and string (the layout is a
  function of these alone);
- a glyph's bitmap is kept per font, size, resolution, glyph, transform and the position's
  fraction of a pixel (FreeType's 1/64): moving an outline by whole pixels moves its
  bitmap by whole pixels and changes nothing else (FreeType renders the outline on the
  pixel grid after shifting its control box to whole pixels), so the kept bitmap is drawn
  at the glyph's whole-pixel offset.

Every drawing gives the bytes of a drawing without the caches (``tests/test_plot.py``
draws every kind of figure with both and compares them). Where matplotlib lacks the
internals used here (another version), :func:`agg_canvas` gives matplotlib's own canvas.
"""

from __future__ import annotations

__all__ = ["agg_canvas", "cached_text_available"]

_CLASSES: dict = {}
# bounds of the caches (entries), cleared when reached: a figure holds a few hundred glyphs
_MAX_GLYPHS = 50_000
_MAX_LAYOUTS = 20_000


def _classes():
    """``(canvas class, renderer class)`` drawing text through the caches, or None when
    this matplotlib lacks what they need."""
    if "classes" in _CLASSES:
        return _CLASSES["classes"]
    try:
        import matplotlib as mpl
        import numpy as np
        from matplotlib.backends import backend_agg as B
        from matplotlib.ft2font import RenderMode

        needed = (B.RendererAgg._draw_text_glyphs_and_boxes, B.RendererAgg._prepare_font,
                  B.get_hinting_flag, B._fontManager._find_fonts_by_props, B.get_font,
                  B.FigureCanvasAgg._lastKey)
        del needed
    except (ImportError, AttributeError):
        _CLASSES["classes"] = None
        return None

    fonts: dict = {}
    layouts: dict = {}
    glyphs: dict = {}
    metrics: dict = {}
    matrices: dict = {}
    font_lists = ("font.serif", "font.sans-serif", "font.cursive", "font.fantasy",
                  "font.monospace", "font.family", "text.hinting_factor",
                  "text.kerning_factor", "text.hinting")

    class CachedTextRenderer(B.RendererAgg):
        """matplotlib's Agg renderer with the font, layout and glyph caches."""

        def _prepare_font(self, font_prop):
            key = (font_prop.copy(), tuple(str(mpl.rcParams[k]) for k in font_lists))
            paths = fonts.get(key)
            if paths is None:
                paths = fonts[key] = B._fontManager._find_fonts_by_props(font_prop)
            font = B.get_font(paths)
            font.clear()
            font.set_size(font_prop.get_size_in_points(), self.dpi)
            return font

        def get_text_width_height_descent(self, s, prop, ismath):
            if ismath:  # mathtext and TeX: matplotlib's own measure
                return super().get_text_width_height_descent(s, prop, ismath)
            key = (s, prop.copy(), self.dpi, B.get_hinting_flag(),
                   tuple(str(mpl.rcParams[k]) for k in font_lists))
            whd = metrics.get(key)
            if whd is None:
                if len(metrics) >= _MAX_LAYOUTS:
                    metrics.clear()
                whd = metrics[key] = super().get_text_width_height_descent(s, prop, ismath)
            return whd

        def draw_text(self, gc, x, y, s, prop, angle, ismath=False, mtext=None):
            if ismath:
                return self.draw_mathtext(gc, x, y, s, prop, angle)
            font = self._prepare_font(prop)
            flags = B.get_hinting_flag()
            features = mtext.get_fontfeatures() if mtext is not None else None
            language = mtext.get_language() if mtext is not None else None
            size = prop.get_size_in_points()
            key = (font, size, self.dpi, s, flags,
                   None if features is None else tuple(features),
                   None if language is None else str(language))
            items = layouts.get(key)
            if items is None:
                if len(layouts) >= _MAX_LAYOUTS:
                    layouts.clear()
                items = layouts[key] = [
                    (item.ft_object, item.glyph_index, item.x, item.y)
                    for item in font._layout(s, flags=flags, features=features,
                                             language=language)]
            self._draw_text_glyphs_and_boxes(
                gc, x, y, angle,
                ((ft, size, index, 0, 1, gx, gy) for ft, index, gx, gy in items), [])

        def _draw_text_glyphs_and_boxes(self, gc, x, y, angle, glyph_items, boxes):
            if boxes:  # mathtext's rules: matplotlib's own drawing
                return super()._draw_text_glyphs_and_boxes(gc, x, y, angle, glyph_items,
                                                            boxes)
            import math

            cos = math.cos(math.radians(angle))
            sin = math.sin(math.radians(angle))
            flags = B.get_hinting_flag()
            aa = bool(gc.get_antialiased())
            mode = RenderMode.NORMAL if aa else RenderMode.MONO
            height = self.height
            for font, size, index, slant, extend, dx, dy in glyph_items:
                mkey = (angle, extend, slant)
                matrix = matrices.get(mkey)
                if matrix is None:
                    m = (0x10000 * np.array([[cos, -sin], [sin, cos]])
                         @ [[extend, extend * slant], [0, 1]]).round().astype(int)
                    matrix = matrices[mkey] = (m, tuple(m.ravel().tolist()))
                matrix, matrix_key = matrix
                # the position in FreeType's 1/64 of a pixel (y upwards), as matplotlib's
                dx64 = round(0x40 * (x + dx * cos - dy * sin))
                dy64 = round(0x40 * (height - y + dx * sin + dy * cos))
                key = (font, size, self.dpi, index, matrix_key,
                       dx64 & 63, dy64 & 63, flags, aa)
                hit = glyphs.get(key)
                if hit is None:
                    font.set_size(size, self.dpi)
                    font._set_transform(matrix, [dx64 & 63, dy64 & 63])
                    bitmap = font._render_glyph(index, flags, mode)
                    buffer = np.array(bitmap.buffer, copy=True)
                    if not aa:
                        buffer *= 0xff
                    if len(glyphs) >= _MAX_GLYPHS:
                        glyphs.clear()
                    hit = glyphs[key] = (buffer, bitmap.left, bitmap.top)
                buffer, left, top = hit
                # the bitmap of the whole-pixel part of the position: moved by it
                left += dx64 >> 6
                top += dy64 >> 6
                self._renderer.draw_text_image(buffer, left,
                                               int(height) - top + buffer.shape[0], 0, gc)

    class CachedTextCanvas(B.FigureCanvasAgg):
        """matplotlib's Agg canvas drawing with :class:`CachedTextRenderer`."""

        def get_renderer(self):
            w, h = self.get_width_height(physical=True)
            key = w, h, self.figure.dpi
            if self._lastKey != key:
                self.renderer = CachedTextRenderer(w, h, self.figure.dpi)
                self._lastKey = key
            return self.renderer

    _CLASSES["classes"] = (CachedTextCanvas, CachedTextRenderer)
    return _CLASSES["classes"]


def cached_text_available() -> bool:
    """Whether this matplotlib has the internals the caches use."""
    return _classes() is not None


def agg_canvas(fig, cached_text: bool = True):
    """The Agg canvas of ``fig`` to draw it with (kept on the figure: a kept figure keeps
    its canvas and the canvas its renderer): drawing text through the caches, or
    matplotlib's own when ``cached_text`` is false or the caches are not available."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    classes = _classes() if cached_text else None
    want = FigureCanvasAgg if classes is None else classes[0]
    return fig.canvas if type(fig.canvas) is want else want(fig)
