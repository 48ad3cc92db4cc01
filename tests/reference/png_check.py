"""Independent PNG reader for the FedGrid chart tests: Python standard library only (zlib, struct).

Usage: /usr/bin/python3 png_check.py FILE.png X,Y [X,Y ...]
Prints one line "WIDTH HEIGHT" and then one line "R G B" per requested pixel.
Follows the PNG specification (W3C / ISO/IEC 15948): checks the signature and every chunk's
CRC-32 (zlib.crc32), accepts 8-bit truecolour (type 2) and truecolour with alpha (type 6),
non-interlaced, and undoes all five filter types. Exits with status 1 and a message on error.
"""
import struct
import sys
import zlib


def fail(msg):
    print("png_check: " + msg, file=sys.stderr)
    sys.exit(1)


def read_png(path):
    data = open(path, "rb").read()
    if data[:8] != b"\x89PNG\r\n\x1a\n":
        fail("bad signature")
    pos, idat, ihdr, seen_end = 8, b"", None, False
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        ctype = data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + length]
        (crc,) = struct.unpack(">I", data[pos + 8 + length:pos + 12 + length])
        if zlib.crc32(ctype + body) & 0xFFFFFFFF != crc:
            fail("CRC mismatch in chunk %r" % ctype)
        if ctype == b"IHDR":
            ihdr = struct.unpack(">IIBBBBB", body)
        elif ctype == b"IDAT":
            idat += body
        elif ctype == b"IEND":
            seen_end = True
            break
        pos += 12 + length
    if ihdr is None or not seen_end:
        fail("missing IHDR or IEND")
    width, height, depth, ctype, comp, filt, interlace = ihdr
    if depth != 8 or ctype not in (2, 6) or comp != 0 or filt != 0 or interlace != 0:
        fail("unsupported IHDR %r" % (ihdr,))
    bpp = 3 if ctype == 2 else 4
    raw = zlib.decompress(idat)
    stride = width * bpp
    if len(raw) != height * (stride + 1):
        fail("IDAT holds %d bytes, expected %d" % (len(raw), height * (stride + 1)))
    rows, prev = [], bytearray(stride)
    for y in range(height):
        f = raw[y * (stride + 1)]
        line = bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
        for i in range(stride):
            a = line[i - bpp] if i >= bpp else 0
            b = prev[i]
            c = prev[i - bpp] if i >= bpp else 0
            if f == 0:
                pred = 0
            elif f == 1:
                pred = a
            elif f == 2:
                pred = b
            elif f == 3:
                pred = (a + b) // 2
            elif f == 4:
                p = a + b - c
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
                pred = a if pa <= pb and pa <= pc else (b if pb <= pc else c)
            else:
                fail("bad filter type %d in row %d" % (f, y))
            line[i] = (line[i] + pred) & 0xFF
        rows.append(line)
        prev = line
    return width, height, bpp, rows


def main():
    if len(sys.argv) < 2:
        fail("usage: png_check.py FILE.png X,Y ...")
    width, height, bpp, rows = read_png(sys.argv[1])
    print(width, height)
    for arg in sys.argv[2:]:
        x, y = (int(v) for v in arg.split(","))
        px = rows[y][x * bpp:x * bpp + 3]
        print(px[0], px[1], px[2])


main()
