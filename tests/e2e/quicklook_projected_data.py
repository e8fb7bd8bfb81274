"""Helpers of tests/e2e/test_quicklook_projected.py (quicklook on projected
and curvilinear grids).

- parse_window: the grid window of quicklook's --verbose line on a projected
  or curvilinear map ("<name> grid window C0..C1, R0..R1").
- pixel_of_xy: the pixel holding grid coordinates (x, y) on such a map (x to
  the right, y up; the same mapping as seatilt::grid_to_pixel).
- dark_components: 8-connected groups of near-black pixels (the arrows) in
  the map box, found by a plain flood fill (no image library needed).
- head_direction: which way an arrow points, from its pixels: the axis of
  largest spread (principal component), oriented towards the end that holds
  the arrow head (the barbs put more pixels near the head, so the centroid
  lies on the head's side of the middle of the shaft).
"""

from __future__ import annotations

import re

import numpy as np

WINDOW = re.compile(r"(?P<name>\S+) grid window (?P<c0>\S+)\.\.(?P<c1>\S+), (?P<r0>\S+)\.\.(?P<r1>[^,\s]+)")


def parse_window(stderr):
    """{name, c0, c1, r0, r1} of the --verbose line (numbers as floats)."""
    m = WINDOW.search(stderr)
    if not m:
        raise AssertionError(f"no grid window in: {stderr!r}")
    d = m.groupdict()
    for k in ("c0", "c1", "r0", "r1"):
        d[k] = float(d[k])
    return d


def pixel_of_xy(info, window, x, y):
    """Pixel (column, row) holding grid coordinates X, Y."""
    px = info["mx"] + int(np.floor((x - window["c0"]) / (window["c1"] - window["c0"]) * info["mw"]))
    py = info["my"] + int(np.floor((window["r1"] - y) / (window["r1"] - window["r0"]) * info["mh"]))
    return px, py


def xy_of_pixel(info, window, px, py):
    """Grid coordinates at the centre of pixel (PX, PY) (float pixels allowed)."""
    x = window["c0"] + (px - info["mx"] + 0.5) / info["mw"] * (window["c1"] - window["c0"])
    y = window["r1"] - (py - info["my"] + 0.5) / info["mh"] * (window["r1"] - window["r0"])
    return x, y


def dark_components(img, info, threshold=150, min_pixels=15):
    """Lists of (row, column) of 8-connected pixels darker than THRESHOLD in
    every channel inside the map box; groups smaller than MIN_PIXELS dropped.
    On a near-white field (#F7F7F7) the 1-pixel graticule lines (30 % black,
    about 173) stay above the default threshold; arrows (black) fall below."""
    x0, y0, w, h = info["mx"], info["my"], info["mw"], info["mh"]
    box = img[y0:y0 + h, x0:x0 + w].astype(int)
    dark = (box < threshold).all(axis=2)
    seen = np.zeros_like(dark)
    groups = []
    for r, c in zip(*np.nonzero(dark)):
        if seen[r, c]:
            continue
        stack, pts = [(r, c)], []
        seen[r, c] = True
        while stack:
            a, b = stack.pop()
            pts.append((a + y0, b + x0))
            for da in (-1, 0, 1):
                for db in (-1, 0, 1):
                    q, s = a + da, b + db
                    if 0 <= q < h and 0 <= s < w and dark[q, s] and not seen[q, s]:
                        seen[q, s] = True
                        stack.append((q, s))
        if len(pts) >= min_pixels:
            groups.append(np.asarray(pts, dtype=float))
    return groups


def head_direction(points):
    """(centre, unit direction) of an arrow drawn as POINTS (row, column);
    the direction is in page coordinates (x right, y down)."""
    xy = points[:, ::-1]                       # (x, y)
    centroid = xy.mean(axis=0)
    _, vecs = np.linalg.eigh(np.cov((xy - centroid).T))
    axis = vecs[:, -1]                         # largest spread
    t = (xy - centroid) @ axis
    middle = 0.5 * (t.min() + t.max())         # middle of the shaft (tail to tip)
    sign = -1.0 if middle > 0 else 1.0         # the centroid (t = 0) lies towards the head
    return centroid + middle * axis, sign * axis
