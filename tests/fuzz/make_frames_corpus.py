#!/usr/bin/python3
# Writes the seed corpus of frames_fuzzer (tests/fuzz/corpus/frames/): small
# .ftrec recordings, hand-encoded with the protobuf wire format (field tags
# of io/proto/recording.proto), some valid and some broken on purpose.
# Run from anywhere: /usr/bin/python3 tests/fuzz/make_frames_corpus.py
import math
import os
import struct

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "corpus", "frames")


def varint(n):
    out = bytearray()
    while True:
        b = n & 0x7F
        n >>= 7
        out.append(b | (0x80 if n else 0))
        if not n:
            return bytes(out)


def field_bytes(number, payload):
    return varint(number << 3 | 2) + varint(len(payload)) + payload


def field_varint(number, value):
    return varint(number << 3 | 0) + varint(value)


def header(channels, magic=b"fluxtrim-recording", version=1, comment=b""):
    m = field_bytes(1, magic) + field_varint(2, version)
    for name, unit, long_name in channels:
        c = field_bytes(1, name)
        if unit:
            c += field_bytes(2, unit)
        if long_name:
            c += field_bytes(3, long_name)
        m += field_bytes(3, c)
    m += field_bytes(4, b"time")
    if comment:
        m += field_bytes(5, comment)
    return m


def frame(values):
    return field_bytes(1, b"".join(struct.pack("<d", v) for v in values))


def delimited(*messages):
    return b"".join(varint(len(m)) + m for m in messages)


SURVEY = [(b"time", b"s", b""), (b"bx", b"nT", b"fluxgate x"),
          (b"by", b"nT", b""), (b"bz", b"nT", b""), (b"f", b"nT", b"")]

rows = []
for i in range(20):
    t = 35012.3 + 0.1 * i
    rows += [round(t, 1), 18234.51 + i, -2301.07, 47811.92 - i, 51234.77]

seeds = {
    "survey": delimited(header(SURVEY, comment=b"invented line"),
                        frame(rows[:50]), frame(rows[50:])),
    "empty_frame": delimited(header(SURVEY[:2]), frame([]), frame([0, 1]),
                             frame([])),
    "nan_inf": delimited(header(SURVEY[:3]),
                         frame([0, math.nan, 1, 1, math.inf, -math.inf])),
    "unpacked": delimited(header(SURVEY[:2]),
                          varint(1 << 3 | 1) + struct.pack("<d", 0.0) +
                          varint(1 << 3 | 1) + struct.pack("<d", 5.0)),
    "bad_magic": delimited(header(SURVEY[:2], magic=b"other"), frame([0, 1])),
    "bad_version": delimited(header(SURVEY[:2], version=2), frame([0, 1])),
    "cut": delimited(header(SURVEY), frame(rows[:25]))[:-7],
    "huge_prefix": delimited(header(SURVEY[:1])) + varint(5 * 10**9),
    "backwards": delimited(header(SURVEY[:1]), frame([1, 2]), frame([1.5])),
    "header_only": delimited(header(SURVEY)),
}

os.makedirs(OUT, exist_ok=True)
for name, data in seeds.items():
    with open(os.path.join(OUT, name), "wb") as f:
        f.write(data)
print("wrote", len(seeds), "seeds to", OUT)
