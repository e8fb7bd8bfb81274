"""Helpers of the `seatilt quicklook` end-to-end tests.

- read_png: a small PNG decoder written from the PNG specification (W3C
  Portable Network Graphics (PNG) Specification, 2nd ed., 2003 = ISO/IEC
  15948:2004: chunk layout section 5, IHDR 11.2.2, filters 9.2 incl. the
  Paeth predictor) with the standard library's zlib, so the test does not
  rely on the Cairo/libpng pair that wrote the file. 8-bit RGB and RGBA,
  non-interlaced (what Cairo writes).
- parse_info: the --verbose line of `quicklook`.
- signed_field: an invented sea level anomaly that is positive north of the
  equator and negative south of it (zero on the equator row).
"""

from __future__ import annotations

import re
import struct
import zlib

import numpy as np

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"   # PNG spec 5.2

# Colours of the colour maps (quicklook.hpp references): no-data grey (project
# choice), ColorBrewer RdBu middle class #F7F7F7 (colorbrewer2.org).
NO_DATA = (153, 153, 153)
DIVERGING_CENTRE = (247, 247, 247)


def read_png(path):
    """Return an (height, width, 3) uint8 array of the RGB pixels of PATH."""
    with open(path, "rb") as f:
        data = f.read()
    if data[:8] != PNG_SIGNATURE:
        raise ValueError("not a PNG signature")
    pos, idat, ihdr = 8, [], None
    while pos < len(data):
        length, ctype = struct.unpack(">I4s", data[pos:pos + 8])
        body = data[pos + 8:pos + 8 + length]
        crc = struct.unpack(">I", data[pos + 8 + length:pos + 12 + length])[0]
        if zlib.crc32(ctype + body) & 0xFFFFFFFF != crc:   # spec 5.3: CRC over type and data
            raise ValueError(f"bad CRC in chunk {ctype!r}")
        if ctype == b"IHDR":
            ihdr = struct.unpack(">IIBBBBB", body)
        elif ctype == b"IDAT":
            idat.append(body)
        elif ctype == b"IEND":
            break
        pos += 12 + length
    if ihdr is None:
        raise ValueError("no IHDR")
    width, height, depth, colour, _, _, interlace = ihdr
    if depth != 8 or colour not in (2, 6) or interlace != 0:
        raise ValueError(f"unsupported PNG: depth {depth}, colour type {colour}, interlace {interlace}")
    bpp = 3 if colour == 2 else 4
    raw = zlib.decompress(b"".join(idat))
    stride = width * bpp
    if len(raw) != height * (stride + 1):
        raise ValueError("IDAT size does not match IHDR")
    out = np.zeros((height, stride), dtype=np.uint8)
    prev = np.zeros(stride, dtype=np.int32)
    for y in range(height):
        ftype = raw[y * (stride + 1)]
        line = np.frombuffer(raw, dtype=np.uint8, count=stride, offset=y * (stride + 1) + 1).astype(np.int32)
        if ftype == 0:                        # None
            cur = line
        elif ftype == 1:                      # Sub: running sum per channel
            cur = line.reshape(width, bpp).cumsum(axis=0).reshape(stride) & 0xFF
        elif ftype == 2:                      # Up
            cur = (line + prev) & 0xFF
        elif ftype in (3, 4):                 # Average, Paeth: byte by byte
            cur_l = [0] * stride
            lb, pb = line.tolist(), prev.tolist()
            for i in range(stride):
                a = cur_l[i - bpp] if i >= bpp else 0
                b = pb[i]
                if ftype == 3:
                    cur_l[i] = (lb[i] + ((a + b) >> 1)) & 0xFF
                else:
                    c = pb[i - bpp] if i >= bpp else 0
                    p = a + b - c
                    pa, pbb, pc = abs(p - a), abs(p - b), abs(p - c)
                    pred = a if (pa <= pbb and pa <= pc) else (b if pbb <= pc else c)
                    cur_l[i] = (lb[i] + pred) & 0xFF
            cur = np.asarray(cur_l, dtype=np.int32)
        else:
            raise ValueError(f"bad filter type {ftype}")
        out[y] = cur
        prev = cur
    return out.reshape(height, width, bpp)[:, :, :3]


INFO = re.compile(
    r"wrote (?P<path>.+?) \((?P<w>\d+) x (?P<h>\d+) px\): (?P<var>\S+) \[(?P<units>[^\]]*)\]"
    r".*?, (?P<scale>sequential|diverging) colours (?P<lo>\S+) \.\. (?P<hi>\S+) \((?P<how>[^)]*)\), "
    r"map box (?P<mx>\d+),(?P<my>\d+),(?P<mw>\d+),(?P<mh>\d+), "
    r"colour bar (?P<bx>\d+),(?P<by>\d+),(?P<bw>\d+),(?P<bh>\d+), "
    r"region lon (?P<lon0>\S+)\.\.(?P<lon1>\S+) lat (?P<lat0>\S+)\.\.(?P<lat1>\S+?)(?:,|$)")


def parse_info(stderr):
    """Return the fields of quicklook's --verbose line (numbers converted)."""
    for line in stderr.splitlines():
        m = INFO.search(line)
        if m:
            d = m.groupdict()
            for k in ("w", "h", "mx", "my", "mw", "mh", "bx", "by", "bw", "bh"):
                d[k] = int(d[k])
            for k in ("lo", "hi", "lon0", "lon1", "lat0", "lat1"):
                d[k] = float(d[k])
            d["line"] = line
            return d
    raise AssertionError(f"no quicklook info line in: {stderr!r}")


def pixel_of(info, lon, lat):
    """Pixel (x, y) whose centre is nearest to (lon, lat) on the map of INFO."""
    lon = lon - 360.0 * np.floor((lon - info["lon0"]) / 360.0)
    x = info["mx"] + int(np.floor((lon - info["lon0"]) / (info["lon1"] - info["lon0"]) * info["mw"]))
    y = info["my"] + int(np.floor((info["lat1"] - lat) / (info["lat1"] - info["lat0"]) * info["mh"]))
    return x, y


def colour_near(img, info, lon, lat):
    """Most common RGB of the 3 x 3 pixels at (lon, lat): a 1-pixel graticule
    line through the point cannot change it."""
    x, y = pixel_of(info, lon, lat)
    assert info["mx"] < x < info["mx"] + info["mw"] - 1 and info["my"] < y < info["my"] + info["mh"] - 1
    patch = [tuple(int(c) for c in img[y + dy, x + dx]) for dy in (-1, 0, 1) for dx in (-1, 0, 1)]
    return max(set(patch), key=patch.count)


def signed_field(make_ssh, step=2.0):
    """Sea level anomaly eta = 0.2 m * sin(lat) on a global grid with
    descending latitude (60N..60S, the equator row exactly 0) and longitudes
    -180..180; one land block (fill) at 20..30N, 40..60E; one time step."""
    import datetime as dt
    lat = make_ssh.axis(60.0, -60.0, -step)
    lon = make_ssh.global_lon(step, start=-180.0)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    eta = 0.2 * np.sin(np.radians(la))
    eta[la == 0.0] = 0.0
    eta[(la >= 20) & (la <= 30) & (lo >= 40) & (lo <= 60)] = np.nan
    return make_ssh.SshField(lat, lon, eta, times=[dt.datetime(2031, 5, 17)], kind="anomaly",
                             title="invented signed test field")
