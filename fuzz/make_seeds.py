#!/usr/bin/env python3
"""Writes the seed inputs of the fuzz targets into fuzz/seeds/<target>/.

Real files: codebooks and streams that the release binary writes from the
committed CSV files and small images, and slices of those CSV files. Hand
made: the edge cases a reader must refuse or accept (empty file, wrong
version, huge counts in a header with a good checksum, a NaN codeword, a
stream of no vectors). Standard library only. Run from the repository root
after `cargo build --release`:

    python3 fuzz/make_seeds.py

The seeds are a starting point; the committed corpus (fuzz/corpus/) is
what `cargo fuzz cmin` kept of them and of what fuzzing found.
"""

import os
import shutil
import struct
import subprocess
import tempfile
import zlib

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
BIN = os.path.join(ROOT, "target", "release", "vqforge")
SEEDS = os.path.join(ROOT, "fuzz", "seeds")

WINE = os.path.join(ROOT, "tests", "data", "wine.csv")
WEATHER = os.path.join(ROOT, "tests", "data", "seattle-weather.csv")
GREENHOUSE = os.path.join(ROOT, "sample-inputs", "greenhouse.csv")
ICONS = os.path.join(ROOT, "sample-inputs", "icons")


def run(*args, cwd):
    subprocess.run([BIN, *args], cwd=cwd, check=True, stdout=subprocess.DEVNULL)


def write(target, name, data):
    folder = os.path.join(SEEDS, target)
    os.makedirs(folder, exist_ok=True)
    with open(os.path.join(folder, name), "wb") as f:
        f.write(data)


def varint(n):
    """postcard's unsigned varint (LEB128)."""
    out = bytearray()
    while True:
        byte = n & 0x7F
        n >>= 7
        if n:
            out.append(byte | 0x80)
        else:
            out.append(byte)
            return bytes(out)


def sealed(magic, header, payload, version=1):
    """A file as docs/file-formats.md lays it out, with a correct CRC."""
    body = magic + struct.pack("<HI", version, len(header)) + header + payload
    return body + struct.pack("<I", zlib.crc32(body))


def plain_book_header(dimension, size):
    # dimension, size, Meaning::Plain (variant 1), then the training facts:
    # seed, restarts, seeding (variant 0), iterations, stopped_by (variant 0),
    # vectors, distinct vectors, mse_scaled (f64 little-endian).
    return (
        varint(dimension)
        + varint(size)
        + varint(1)
        + varint(42)
        + varint(1)
        + varint(0)
        + varint(3)
        + varint(0)
        + varint(10)
        + varint(10)
        + struct.pack("<d", 0.5)
    )


def stream_header(size, bits, vectors, dimension, fingerprint=0):
    # size, bits, vectors, fingerprint, dimension, records: None, image: None
    return (
        varint(size)
        + varint(bits)
        + varint(vectors)
        + varint(fingerprint)
        + varint(dimension)
        + b"\x00\x00"
    )


def real_files(tmp):
    books = [
        ("wine_k16.vqb", [WINE, "-k", "16"]),
        ("wine_k1.vqb", [WINE, "-k", "1", "--scale", "none"]),
        ("wine_k3_minmax.vqb", [WINE, "-k", "3", "--scale", "minmax"]),
        (
            "weather_k5_frame3.vqb",
            [WEATHER, "-k", "5", "--frame", "3", "--columns", "temp_max,temp_min"],
        ),
        ("weather_k2_notime.vqb", [WEATHER, "-k", "2", "--no-time"]),
        ("greenhouse_k4_frame2.vqb", [GREENHOUSE, "-k", "4", "--frame", "2"]),
        ("battery_k4.vqb", [os.path.join(ICONS, "battery.png"), "-k", "4"]),
        (
            "droplet_k6_alpha.vqb",
            [os.path.join(ICONS, "droplet.png"), "-k", "6", "--alpha", "keep"],
        ),
        (
            "sun_k8_rgb565.vqb",
            [os.path.join(ICONS, "sun.png"), "-k", "8", "--display", "rgb565"],
        ),
    ]
    for name, args in books:
        run("train", *args, "-o", name, cwd=tmp)
    streams = [
        ("wine_k16.vqs", WINE, "wine_k16.vqb"),
        ("wine_k1.vqs", WINE, "wine_k1.vqb"),
        ("weather_k5_frame3.vqs", WEATHER, "weather_k5_frame3.vqb"),
        ("greenhouse_k4_frame2.vqs", GREENHOUSE, "greenhouse_k4_frame2.vqb"),
        ("battery_k4.vqs", os.path.join(ICONS, "battery.png"), "battery_k4.vqb"),
        ("droplet_k6_alpha.vqs", os.path.join(ICONS, "droplet.png"), "droplet_k6_alpha.vqb"),
    ]
    for name, source, book in streams:
        run("encode", source, "-b", book, "-o", name, cwd=tmp)
    for name, _ in books:
        with open(os.path.join(tmp, name), "rb") as f:
            write("codebook_reader", name, f.read())
    for name, _, _ in streams:
        with open(os.path.join(tmp, name), "rb") as f:
            data = f.read()
        # The large streams are kept whole only up to 4 KiB; cmin decides.
        if len(data) <= 4096:
            write("stream_reader", name, data)


def csv_slices():
    # The first byte of a csv_loader input chooses the options (see
    # fuzz/harness.rs, csv_options); the rest is the file.
    cases = [
        ("wine_head", WINE, 12, 0x00),
        ("wine_head_frame2_zscore", WINE, 9, 0x50),
        ("weather_head", WEATHER, 12, 0x00),
        ("weather_head_skip_minmax", WEATHER, 12, 0x84),
        ("weather_head_notime_frame4", WEATHER, 10, 0x38),
        ("greenhouse_head", GREENHOUSE, 10, 0x00),
        ("greenhouse_head_frame3", GREENHOUSE, 10, 0x60),
    ]
    for name, path, lines, control in cases:
        with open(path, "rb") as f:
            head = b"".join(f.readlines()[:lines])
        write("csv_loader", name, bytes([control]) + head)
    hand = {
        "semicolon_bom_crlf": (0x05, "\ufeffdate;temp;note\r\n2024-01-01;\"1,5\";ok\r\n2024-01-02; 2 ;\r\n2024-01-03;;late\r\n"),
        "tab_numbers_time": (0x02, "t\ta\tb\n0\t1\t2\n60\t3\t4\n120\t5\t6\n"),
        "space_single": (0x03, "x\n1\n"),
        "datetime_seconds": (0x00, "datetime,v\n2024-02-29 23:59:59,1e3\n2024-03-01 00:00:00,-2.5e-3\n"),
        "inf_nan": (0x04, "a,b\ninf,1\nnan,2\n3,4\n"),
        "huge_values": (0x40, "a\n1e308\n-1e308\n"),
        "quoted_header": (0x00, "\"a,b\",c\n1,2\n"),
        "ragged": (0x00, "a,b\n1,2\n3\n"),
        "header_only": (0x00, "a,b\n"),
        "empty": (0x00, ""),
    }
    for name, (control, text) in hand.items():
        write("csv_loader", name, bytes([control]) + text.encode("utf-8"))


def hand_made():
    book_magic, stream_magic = b"VQFORGEB", b"VQFORGES"
    for target, magic in (("codebook_reader", book_magic), ("stream_reader", stream_magic)):
        write(target, "empty", b"")
        write(target, "magic_only", magic)
        write(target, "version_2", sealed(magic, b"", b"", version=2))
    one = struct.pack("<ff", 0.25, -1.5)
    write("codebook_reader", "plain_d2_k1", sealed(book_magic, plain_book_header(2, 1), one))
    write(
        "codebook_reader",
        "nan_codeword",
        sealed(book_magic, plain_book_header(1, 2), struct.pack("<ff", 1.0, float("nan"))),
    )
    write(
        "codebook_reader",
        "huge_size",
        sealed(book_magic, plain_book_header(1 << 62, 1 << 62), one),
    )
    write(
        "codebook_reader",
        "header_length_huge",
        book_magic + struct.pack("<HI", 1, 0xFFFFFFFF) + b"\0" * 8,
    )
    write("stream_reader", "no_vectors", sealed(stream_magic, stream_header(2, 1, 0, 1), b""))
    write(
        "stream_reader",
        "size_2_32",
        sealed(stream_magic, stream_header(1 << 32, 32, 1, 1), b"\xff\xff\xff\xfe"),
    )
    write(
        "stream_reader",
        "huge_count",
        sealed(stream_magic, stream_header(256, 8, (1 << 64) - 1, 3), b"\x01"),
    )
    write(
        "stream_reader",
        "k3_bits2",
        sealed(stream_magic, stream_header(3, 2, 4, 2), bytes([0b0001_1000])),
    )


def main():
    shutil.rmtree(SEEDS, ignore_errors=True)
    with tempfile.TemporaryDirectory() as tmp:
        real_files(tmp)
    csv_slices()
    hand_made()


if __name__ == "__main__":
    main()
