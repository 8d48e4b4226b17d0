"""Small scans made on the fly for archive tests (invented content: a grid with a pen line)."""

from __future__ import annotations

import io

import numpy as np
from PIL import Image


def chart_image(width: int = 640, height: int = 400, *, seed: int = 0) -> Image.Image:
    """A pale sheet with a grid and one pen line; ``seed`` changes the line so files differ."""
    pixels = np.full((height, width, 3), (246, 242, 230), dtype=np.uint8)
    pixels[::40, :, :] = (170, 200, 170)
    pixels[:, ::40, :] = (170, 200, 170)
    columns = np.arange(width)
    rows = (height / 2 + (height / 4) * np.sin(columns / 60.0 + seed)).astype(int)
    pixels[rows, columns] = (30, 40, 160)
    return Image.fromarray(pixels)


def encoded(image: Image.Image, image_format: str, **options: object) -> bytes:
    buffer = io.BytesIO()
    image.save(buffer, format=image_format, **options)
    return buffer.getvalue()


def png_bytes(seed: int = 0, **size: int) -> bytes:
    return encoded(chart_image(seed=seed, **size), "PNG")


def multipage_tiff_bytes(pages: int) -> bytes:
    frames = [chart_image(seed=index) for index in range(pages)]
    buffer = io.BytesIO()
    frames[0].save(buffer, format="TIFF", save_all=True, append_images=frames[1:], compression="tiff_lzw")
    return buffer.getvalue()


def pdf_bytes(pages: int) -> bytes:
    frames = [chart_image(seed=index).convert("RGB") for index in range(pages)]
    buffer = io.BytesIO()
    frames[0].save(buffer, format="PDF", save_all=True, append_images=frames[1:], resolution=72.0)
    return buffer.getvalue()
