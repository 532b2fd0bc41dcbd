#!/usr/bin/env python3
"""Is a PNG screenshot blank? Decodes the PNG with the standard library only (zlib; the five
row filters of the PNG specification, W3C 2003, section 9) and prints the share of pixels that
are not white and the number of distinct colours. Exits 1 when fewer than `min_share` of the
pixels are drawn or fewer than `min_colours` colours appear.

    python3 check_screenshot.py shot.png [min_share=0.02] [min_colours=8]
"""
import struct
import sys
import zlib


def pixels(path):
    data = open(path, "rb").read()
    if data[:8] != b"\x89PNG\r\n\x1a\n":
        raise SystemExit(f"{path}: not a PNG file")
    pos, idat, header = 8, b"", None
    while pos < len(data):
        length, kind = struct.unpack(">I4s", data[pos:pos + 8])
        body = data[pos + 8:pos + 8 + length]
        if kind == b"IHDR":
            header = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat += body
        pos += 12 + length
    width, height, depth, colour, _, _, interlace = header
    if depth != 8 or colour not in (2, 6) or interlace != 0:
        raise SystemExit(f"{path}: expected 8-bit RGB or RGBA without interlacing")
    channels = 3 if colour == 2 else 4
    stride = width * channels
    raw = zlib.decompress(idat)
    previous = bytearray(stride)
    rows = []
    for y in range(height):
        kind = raw[y * (stride + 1)]
        line = bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
        for i in range(stride):
            left = line[i - channels] if i >= channels else 0
            up = previous[i]
            corner = previous[i - channels] if i >= channels else 0
            if kind == 1:
                line[i] = (line[i] + left) & 255
            elif kind == 2:
                line[i] = (line[i] + up) & 255
            elif kind == 3:
                line[i] = (line[i] + (left + up) // 2) & 255
            elif kind == 4:
                p = left + up - corner
                pa, pb, pc = abs(p - left), abs(p - up), abs(p - corner)
                pred = left if pa <= pb and pa <= pc else (up if pb <= pc else corner)
                line[i] = (line[i] + pred) & 255
        rows.append(bytes(line))
        previous = line
    for line in rows:
        for x in range(width):
            yield tuple(line[x * channels:x * channels + 3])


def main():
    path = sys.argv[1]
    min_share = float(sys.argv[2]) if len(sys.argv) > 2 else 0.02
    min_colours = int(sys.argv[3]) if len(sys.argv) > 3 else 8
    total = drawn = 0
    colours = set()
    for rgb in pixels(path):
        total += 1
        if rgb != (255, 255, 255):
            drawn += 1
        if len(colours) < 10000:
            colours.add(rgb)
    share = drawn / max(total, 1)
    print(f"{path}: {share:.3f} of {total} pixels drawn, {len(colours)} colours")
    if share < min_share or len(colours) < min_colours:
        print(f"{path}: looks blank", file=sys.stderr)
        sys.exit(1)


if __name__ == "__main__":
    main()
