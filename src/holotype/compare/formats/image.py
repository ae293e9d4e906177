"""Images (PNG, JPEG, TIFF, WebP, GIF, BMP), decoded by Pillow and compared pixel by pixel in strips.

The sizes must match (a size change fails with both sizes). Then each pixel's channels are compared,
after both sides are brought to one mode (RGB, or RGBA when either has transparency, so a palette PNG
equals the RGB PNG of the same picture). A pixel has changed when one of its channels moved by more
than `channel_delta` (0-255); the image passes while the share of changed pixels is at most
`pixel_share`. Defaults and their reasons are in tolerance.py and docs/tolerances.md.

Memory stays bounded by one decoded image: the recorded image is decoded, converted strip by strip
into a scratch file and released before the fresh one is decoded, then both are read back a strip at a
time. A failing comparison also gives a picture (differing pixels in red over a faded copy of the fresh
image) for the caller to keep beside the run's log.
"""

from __future__ import annotations

import io
import tempfile
import warnings
from typing import Any

import numpy as np

from holotype.compare.formats import register
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.errors import UnreadableOutput
from holotype.tolerance import IMAGE_DEFAULTS, RuleBook

STRIP_PIXELS = 1 << 20  # pixels per strip (1 Mi: 4 MB as RGBA)
MAX_PIXELS = 200_000_000  # a larger declared size is refused before decoding (at most 800 MB decoded, as RGBA)
PICTURE_PIXELS = 40_000_000  # a difference picture of a larger image is drawn at a reduced scale


def _open(src: Source, *, decode: bool = True) -> Any:
    """The image, decoded (or, with decode=False, only its header read: size and mode)."""
    from PIL import Image

    Image.MAX_IMAGE_PIXELS = None  # holotype's own limit below applies, to the header, before any decoding
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # Pillow's size warning: the limit above is the one that applies
            image = Image.open(io.BytesIO(src.read_bytes()))
            if image.width * image.height > MAX_PIXELS:
                raise UnreadableOutput(f"declares {image.width:,} × {image.height:,} pixels, more than "
                                       f"{MAX_PIXELS:,}", src.label)
            if decode:
                image.load()
    except UnreadableOutput:
        raise
    except (OSError, ValueError, SyntaxError, Image.DecompressionBombError) as exc:
        raise UnreadableOutput(f"not a readable image: {str(exc).splitlines()[0][:200]}", src.label) from None
    return image


def _has_alpha(image: Any) -> bool:
    return bool(image.mode in ("RGBA", "LA", "PA") or (image.mode == "P" and "transparency" in image.info))


def _strip(image: Any, top: int, rows: int, mode: str) -> np.ndarray:
    part = image.crop((0, top, image.width, top + rows))
    if part.mode != mode:
        part = part.convert(mode)
    return np.asarray(part, dtype=np.uint8).reshape(rows, image.width, len(mode))


def compare_images(output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
    outcome = Outcome()
    tol = rules.for_output(output)
    delta = IMAGE_DEFAULTS[0] if tol.channel_delta is None else tol.channel_delta
    share = IMAGE_DEFAULTS[1] if tol.pixel_share is None else tol.pixel_share
    old = _open(expected)
    width, height = old.size
    with tempfile.TemporaryFile(prefix="holotype-image-") as scratch:
        old_alpha = _has_alpha(old)
        rows = max(1, STRIP_PIXELS // max(1, width))
        with _open(actual, decode=False) as probe:  # its header only, until the recorded one is released
            new_size, new_alpha = probe.size, _has_alpha(probe)
        if new_size != (width, height):
            old.close()
            outcome.problem("output.shape", f"image size {width:,} × {height:,} recorded, {new_size[0]:,} × "
                            f"{new_size[1]:,} found", f"{width}x{height}", f"{new_size[0]}x{new_size[1]}")
            return outcome
        mode = "RGBA" if old_alpha or new_alpha else "RGB"
        for top in range(0, height, rows):
            scratch.write(_strip(old, top, min(rows, height - top), mode).tobytes())
        old.close()
        del old
        new = _open(actual)
        scratch.seek(0)
        changed_total = 0
        largest = 0
        worst = (0, 0)
        changed_rows: list[np.ndarray] = []  # packed bits of changed pixels, one row of bits per image row
        for top in range(0, height, rows):
            n = min(rows, height - top)
            size = n * width * len(mode)
            before = np.frombuffer(scratch.read(size), dtype=np.uint8).reshape(n, width, len(mode))
            after = _strip(new, top, n, mode)
            diff = np.abs(before.astype(np.int16) - after.astype(np.int16)).max(axis=2)
            changed = diff > delta
            count = int(changed.sum())
            changed_total += count
            peak = int(diff.max()) if diff.size else 0
            if peak > largest:
                largest = peak
                y, x = np.unravel_index(int(diff.argmax()), diff.shape)
                worst = (int(x), int(top + y))
            changed_rows.append(np.packbits(changed, axis=1))
        pixels = width * height
        fraction = changed_total / pixels if pixels else 0.0
        figures = (f"{changed_total:,} of {pixels:,} pixels ({fraction:.3%}) changed by more than {delta}/255 "
                   f"(allowed {share:.3%}); largest channel difference {largest}/255 at pixel {worst}")
        if fraction <= share:
            new.close()
            outcome.problem("output.match", f"image within tolerance: {figures}")
            return outcome
        outcome.problem("output.mismatch", f"image differs: {figures}", f"≤ {share:.3%}", f"{fraction:.3%}")
        outcome.picture = _picture(new, np.concatenate(changed_rows, axis=0), width)
        new.close()
    return outcome


def _picture(new: Any, packed: np.ndarray, width: int) -> bytes:
    """Changed pixels in red over a faded grey copy of the fresh image (reduced when the image is huge)."""
    from PIL import Image

    height = packed.shape[0]
    scale = 1
    while (width // scale) * (height // scale) > PICTURE_PIXELS:
        scale += 1
    out_w, out_h = width // scale, height // scale
    faded = np.empty((out_h, out_w), dtype=np.uint8)  # palette entries 0-127: light greys
    rows = max(scale, (STRIP_PIXELS // max(1, width)) // scale * scale)
    for top in range(0, out_h * scale, rows):
        part = new.crop((0, top, out_w * scale, min(top + rows, out_h * scale))).convert("L")
        if scale > 1:
            part = part.reduce(scale)
        faded[top // scale: top // scale + part.height] = np.asarray(part, dtype=np.uint8) // 2
    for y in range(out_h):
        bits = np.asarray(np.unpackbits(packed[y * scale:(y + 1) * scale], axis=1, count=width).any(axis=0))
        if scale > 1:
            bits = np.asarray(bits[: out_w * scale].reshape(out_w, scale).any(axis=1))
        faded[y][bits[:out_w]] = 255
    picture = Image.frombytes("P", (out_w, out_h), np.ascontiguousarray(faded).tobytes())
    palette = []
    for i in range(256):
        level = 128 + i if i < 128 else 0
        palette += [255, 0, 0] if i == 255 else [level, level, level]
    picture.putpalette(palette)
    buffer = io.BytesIO()
    picture.save(buffer, format="PNG", optimize=False)
    return buffer.getvalue()


class ImageFormat:
    name: str = "image"
    suffixes: tuple[str, ...] = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".webp", ".gif", ".bmp")
    honours: frozenset[str] = frozenset({"channel_delta", "pixel_share"})

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_images(output, expected, actual, rules)


register(ImageFormat())
