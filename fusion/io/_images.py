"""Reading speckle images (PNG, TIFF; 8 or 16 bit; grey or colour) as grey arrays."""

from __future__ import annotations

import struct
from numbers import Integral
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._guard import decoding, input_file, quiet_logger

__all__ = ["read_image", "image_shape", "decode_png"]

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_SUFFIXES = {".png": "png", ".tif": "tiff", ".tiff": "tiff"}
# ITU-R BT.709 luma weights, the ones skimage.color.rgb2gray uses
_LUMA = np.array([0.2125, 0.7154, 0.0721])


def _png_size(path):
    with open(path, "rb") as fh:
        head = fh.read(33)
    if len(head) < 24 or head[:8] != _PNG_SIGNATURE or head[12:16] != b"IHDR":
        raise InputError(path, "is not a PNG file (expected the PNG signature and an IHDR chunk)")
    width, height = struct.unpack(">II", head[16:24])
    return int(height), int(width)


def decode_png(path, what="a PNG image"):
    """The pixels of a PNG file as OpenCV decodes them (grey, grey + alpha, BGR or BGRA)."""
    import cv2

    raw = np.fromfile(path, dtype=np.uint8)  # imdecode also copes with non-ASCII paths
    # OpenCV prints its own warning on a truncated stream; we report the file ourselves
    level = cv2.utils.logging.getLogLevel()
    cv2.utils.logging.setLogLevel(cv2.utils.logging.LOG_LEVEL_ERROR)
    try:
        with decoding(path, what):
            img = cv2.imdecode(raw, cv2.IMREAD_UNCHANGED)
    finally:
        cv2.utils.logging.setLogLevel(level)
    if img is None:
        raise InputError(path, "could not be decoded as a PNG image: probably cut short or damaged (an "
                         "interrupted copy or transfer?)")
    return img


def _decode_png(path):
    img = decode_png(path)
    if img.ndim == 3:
        channels = img.shape[2]
        if channels == 2:  # grey + alpha
            img = img[..., 0]
        elif channels in (3, 4):  # OpenCV orders colour as BGR(A)
            img = img[..., 2::-1]
        else:
            raise InputError(path, f"has {channels} channels; expected grey, RGB or RGBA")
    return img


def _tiff_shape(path):
    import tifffile

    with quiet_logger("tifffile"), decoding(path, "a TIFF image"):
        with tifffile.TiffFile(path) as tf:
            series = tf.series[0]
            return tuple(series.shape), np.dtype(series.dtype), len(tf.series)


def _decode_tiff(path):
    import tifffile

    with quiet_logger("tifffile"), decoding(path, "a TIFF image"):
        return tifffile.imread(path, series=0)


def _to_grey(path, img):
    if img.ndim == 3 and img.shape[0] in (3, 4) and img.shape[-1] not in (3, 4):
        img = np.moveaxis(img, 0, -1)  # planar (samples first) colour TIFF
    if img.ndim == 3 and img.shape[-1] in (3, 4):
        return img[..., :3].astype(np.float64) @ _LUMA, True
    if img.ndim == 3 and img.shape[-1] == 2:
        return img[..., 0], False
    if img.ndim != 2:
        raise InputError(path, f"holds an array of shape {img.shape!r}; expected one 2-D image "
                         "(grey, RGB or RGBA), not a stack")
    return img, False


def image_shape(path) -> tuple[int, int]:
    """(rows, columns) of a speckle image from its header alone, nothing decoded.

    Raises
    ------
    InputError
        Missing file, unknown format, samples that are no grey levels.
    """
    _, shape = _header_pixels(Path(path))
    return shape


def _header_pixels(path):
    """Pixels of one image (a stack counts all its frames) and its (rows, columns), from the header."""
    input_file(path, "a PNG or TIFF image")
    kind = _SUFFIXES.get(path.suffix.lower())
    if kind is None:
        raise InputError(path, f"has the suffix {path.suffix!r}; expected one of "
                         f"{sorted(_SUFFIXES)} (PNG or TIFF)")
    if kind == "png":
        h, w = _png_size(path)
        return h * w, (h, w)
    shape, dtype, _ = _tiff_shape(path)
    if dtype.kind not in "uif":
        raise InputError(path, f"holds {dtype} samples; expected integer or float grey levels")
    channels = 1
    if len(shape) == 3 and shape[-1] in (2, 3, 4):
        channels = shape[-1]
        rows_cols = shape[:2]
    elif len(shape) == 3 and shape[0] in (3, 4):
        channels = shape[0]
        rows_cols = shape[1:]
    else:
        rows_cols = shape[-2:]
    return int(np.prod(shape)) // channels, (int(rows_cols[0]), int(rows_cols[1]))


def read_image(path, *, max_pixels=100_000_000):
    """Read a speckle image as a grey (H, W) array.

    Parameters
    ----------
    path : str or os.PathLike
        A PNG (8 or 16 bit) or TIFF (8/16-bit integer or float; uncompressed, LZW,
        Deflate and the other codecs of ``imagecodecs``) file.
    max_pixels : int
        Refuse images with more pixels than this, checked from the file header
        before decoding.

    Returns
    -------
    (H, W) ndarray
        Grey levels in the file's own scale (0..255 for 8 bit, 0..65535 for
        16 bit): float32 for integer files (exact up to 24 bits) and float32
        files, float64 for float64 files. Colour is converted to grey with the
        ITU-R BT.709 luma weights (those of ``skimage.color.rgb2gray``); an
        alpha channel is dropped.

    Raises
    ------
    InputError
        Missing file, unknown format, a stack instead of one image, too many
        pixels, a decoding failure, or non-finite values.
    """
    path = Path(path)
    if isinstance(max_pixels, bool) or not isinstance(max_pixels, Integral) or max_pixels < 1:
        raise ValueError(f"max_pixels: expected a positive integer, got {max_pixels!r}")
    pixels, _ = _header_pixels(path)
    kind = _SUFFIXES[path.suffix.lower()]
    if pixels > max_pixels:
        raise InputError(path, f"has {pixels} pixels, more than max_pixels={max_pixels}; "
                         "crop the image or raise the limit")
    img = _decode_png(path) if kind == "png" else _decode_tiff(path)
    if img.dtype.kind not in "uif":
        raise InputError(path, f"holds {img.dtype} samples; expected integer or float grey levels")
    grey, _ = _to_grey(path, img)
    if grey.size == 0:
        raise InputError(path, "holds an empty image")
    if img.dtype == np.float64:
        out = np.asarray(grey, dtype=np.float64)
    else:
        out = np.asarray(grey, dtype=np.float32)
    if out.dtype.kind == "f" and not np.all(np.isfinite(out)):
        raise InputError(path, "holds NaN or infinite grey levels; expected finite intensities")
    return out
