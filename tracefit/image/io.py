"""Read micrographs (PNG, TIFF, JPEG, BMP) and float maps (NumPy .npy) into a float32 grey array.

:func:`read_image` accepts 8- and 16-bit, grayscale, RGB and RGBA files, multi-page
TIFF (first page, with a note), floating-point TIFF and 2-D NumPy ``.npy`` arrays (e.g.
HR-DIC strain maps). Values are never rescaled: a strain map stays in strain units.
NaN (where a map has no value, e.g. failed correlation) is kept as NaN, with a note
of how many; :func:`tracefit.image.detect_bands` masks it. Infinite values are an error. 16-bit samples are kept at full precision (float32
holds every integer up to 2**24 exactly); colour becomes luminance with the Rec. 601
luma weights (0.299 R + 0.587 G + 0.114 B; common practice, ITU-R BT.601). Every bad
input raises :class:`tracefit.errors.TracefitInputError` with what was wrong.
"""

from __future__ import annotations

import os
from pathlib import Path

import cv2
import numpy as np

from tracefit.errors import TracefitInputError

__all__ = ["read_image", "read_mask", "to_gray", "IMAGE_SUFFIXES"]

#: File suffixes :func:`read_image` reads (lower case, with the dot).
IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".jpg", ".jpeg", ".bmp", ".npy")
_LUMA = np.array([0.299, 0.587, 0.114], np.float32)  # R, G, B (ITU-R BT.601)


def _kind_from_magic(head: bytes) -> str | None:
    if head.startswith(b"\x89PNG\r\n\x1a\n"):
        return "png"
    if head[:4] in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        return "tiff"
    if head.startswith(b"\xff\xd8\xff"):
        return "jpeg"
    if head.startswith(b"BM"):
        return "bmp"
    if head.startswith(b"\x93NUMPY"):
        return "npy"
    return None


def _read_npy(path: str) -> np.ndarray:
    """A NumPy ``.npy`` array of real numbers (no pickled objects)."""
    try:
        arr = np.load(path, allow_pickle=False)
    except Exception as exc:  # truncated header or data, object arrays
        raise TracefitInputError(f"{path}: cannot read the .npy file ({exc}); expected a saved 2-D numeric array") from None
    if arr.dtype.kind not in "biuf":
        raise TracefitInputError(f"{path}: the .npy array has dtype {arr.dtype}; expected real numbers")
    return arr


def _bgr_to_rgb(arr: np.ndarray) -> np.ndarray:
    """OpenCV decodes colour to BGR(A); reorder to RGB(A). Grey arrays pass unchanged."""
    if arr.ndim == 3 and arr.shape[2] >= 3:
        arr = arr[..., [2, 1, 0] + ([3] if arr.shape[2] == 4 else [])]
    return arr


def _check_complete(data: bytes, kind: str, path: str) -> None:
    """Raise when the file is visibly truncated (decoders often return a partial image)."""
    if kind == "png":
        if b"IEND" not in data[-16:]:
            raise TracefitInputError(f"{path}: the PNG file is truncated (no IEND chunk); expected a complete PNG image")
    elif kind == "jpeg":
        if not data.rstrip(b"\x00").endswith(b"\xff\xd9"):
            raise TracefitInputError(f"{path}: the JPEG file is truncated (no end-of-image marker); expected a complete JPEG image")
    elif kind == "bmp":
        if len(data) >= 6:
            declared = int.from_bytes(data[2:6], "little")
            if declared and len(data) < declared:
                raise TracefitInputError(
                    f"{path}: the BMP file is truncated ({len(data)} of {declared} bytes); expected a complete BMP image"
                )


def to_gray(arr: np.ndarray, notes: list[str] | None = None, channels_last: bool = True) -> np.ndarray:
    """Convert a decoded image array (gray, RGB or RGBA, channels last, RGB order) to float32 grey.

    Colour becomes luminance with the Rec. 601 luma weights (ITU-R BT.601); an RGB image
    whose three channels are equal is read as grey unchanged; alpha is ignored.

    Parameters
    ----------
    arr : ndarray
        (H, W), (H, W, 1), (H, W, 3) or (H, W, 4); any integer or float dtype.
    notes : list of str, optional
        Conversion notes are appended here.
    channels_last : bool
        Accepted for compatibility; channels are always last.

    Returns
    -------
    ndarray of float32, (H, W)
        Grey values in the input's units (0..255 for 8-bit, 0..65535 for 16-bit).

    Raises
    ------
    TracefitInputError
        Any other layout (e.g. two channels, or 4-D).

    Examples
    --------
    >>> import numpy as np
    >>> rgb = np.zeros((2, 2, 3), np.uint8)
    >>> rgb[..., 0] = 200
    >>> notes = []
    >>> g = to_gray(rgb, notes)
    >>> g.dtype.name, round(float(g[0, 0]), 1), notes
    ('float32', 59.8, ['RGB converted to luminance (0.299 R + 0.587 G + 0.114 B)'])
    """
    notes = notes if notes is not None else []
    a = np.asarray(arr)
    if a.ndim == 3 and a.shape[2] == 1:
        a = a[..., 0]
    if a.ndim == 2:
        return a.astype(np.float32, copy=False)
    if a.ndim != 3 or a.shape[2] not in (3, 4):
        raise TracefitInputError(f"unsupported image layout {a.shape}; expected grey, RGB or RGBA")
    if a.shape[2] == 4:
        notes.append("alpha channel ignored")
    rgb = a[..., :3]
    if np.array_equal(rgb[..., 0], rgb[..., 1]) and np.array_equal(rgb[..., 1], rgb[..., 2]):
        notes.append("RGB image with equal channels read as grey")
        return rgb[..., 0].astype(np.float32)
    notes.append("RGB converted to luminance (0.299 R + 0.587 G + 0.114 B)")
    out = np.zeros(a.shape[:2], np.float32)
    for k in range(3):  # channel by channel: no full-size float64 temporaries
        out += rgb[..., k].astype(np.float32) * _LUMA[k]
    return out


class _QuietDecoders:
    """While decoding, native libraries (libpng via OpenCV) and tifffile's logger stay silent.

    A damaged file is reported once, as tracefit's own one-line error; libpng writes its own
    complaint straight to file descriptor 2 and tifffile logs one, which would add lines
    beside it. Descriptor 2 goes to /dev/null for the decode only.
    """

    def __enter__(self):
        import logging
        import sys

        self._logger = logging.getLogger("tifffile")
        self._level = self._logger.level
        self._logger.setLevel(logging.CRITICAL)
        self._saved = None
        try:
            sys.stderr.flush()
            self._saved = os.dup(2)
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, 2)
            os.close(devnull)
        except OSError:  # no real descriptor 2 (embedded interpreter): nothing to silence
            self._saved = None
        return self

    def __exit__(self, *exc):
        if self._saved is not None:
            os.dup2(self._saved, 2)
            os.close(self._saved)
        self._logger.setLevel(self._level)
        return False


def _read_tiff(path: str, notes: list[str]) -> np.ndarray:
    with _QuietDecoders():
        return _read_tiff_quietly(path, notes)


def _read_tiff_quietly(path: str, notes: list[str]) -> np.ndarray:
    import tifffile

    try:
        with tifffile.TiffFile(path) as tf:
            n_pages = len(tf.pages)
            if n_pages == 0:
                raise TracefitInputError(f"{path}: the TIFF file has no pages; expected at least one image")
            page = tf.pages[0]
            arr = page.asarray()
            samples = getattr(page, "samplesperpixel", 1)
            planar = getattr(page, "planarconfig", None)
    except TracefitInputError:
        raise
    except Exception as exc:  # tifffile raises many kinds for damaged files
        # compressions tifffile cannot decode without extra codecs (e.g. LZW): OpenCV can
        ok, pages = cv2.imreadmulti(path, flags=cv2.IMREAD_UNCHANGED)
        if not ok or not pages:
            raise TracefitInputError(f"{path}: cannot read the TIFF file ({exc}); expected a complete TIFF image") from None
        if len(pages) > 1:
            notes.append(f"multi-page TIFF with {len(pages)} pages: the first page was used")
        return _bgr_to_rgb(pages[0])
    if n_pages > 1:
        notes.append(f"multi-page TIFF with {n_pages} pages: the first page was used")
    if arr.ndim == 3 and samples in (3, 4) and arr.shape[0] == samples and arr.shape[-1] != samples:
        arr = np.moveaxis(arr, 0, -1)  # planar (separate) RGB
    elif planar is not None and arr.ndim == 3 and arr.shape[-1] not in (1, 3, 4):
        raise TracefitInputError(f"{path}: the first TIFF page has shape {arr.shape}; expected a 2-D grey or RGB(A) image")
    return arr


def read_image(path: str | os.PathLike) -> tuple[np.ndarray, list[str]]:
    """Read a micrograph as a float32 grey array.

    Parameters
    ----------
    path : str or Path
        PNG, TIFF (8/16-bit or floating point, multi-page: first page), JPEG or BMP
        file, grey, RGB or RGBA; or a NumPy ``.npy`` file of a 2-D real array.

    Returns
    -------
    gray : ndarray of float32, (H, W)
        Grey values in the file's units (0..255 for 8-bit, 0..65535 for 16-bit, a float
        map's own units), NaN where a float map has no value.
    notes : list of str
        What was done on the way (bit depth, colour conversion, pages used).

    Raises
    ------
    TracefitInputError
        Missing file, empty file, not an image, truncated file, zero-size image,
        infinite values or NaN everywhere.

    Examples
    --------
    >>> import os, tempfile
    >>> import cv2, numpy as np
    >>> path = os.path.join(tempfile.mkdtemp(), "grey16.png")
    >>> _ = cv2.imwrite(path, np.full((32, 48), 40000, np.uint16))
    >>> gray, notes = read_image(path)
    >>> gray.shape, gray.dtype.name, float(gray[0, 0]), notes
    ((32, 48), 'float32', 40000.0, ['16-bit PNG'])

    A strain map with a hole, saved by NumPy:

    >>> strain = np.full((20, 30), 0.012)
    >>> strain[5, 5] = np.nan
    >>> np.save(os.path.join(tempfile.gettempdir(), "strain.npy"), strain)
    >>> gray, notes = read_image(os.path.join(tempfile.gettempdir(), "strain.npy"))
    >>> round(float(gray[0, 0]), 4), bool(np.isnan(gray[5, 5])), notes
    (0.012, True, ['floating-point NPY', '1 NaN pixels (0.2 %) kept as NaN (masked by the detector)'])
    """
    # Over 80 lines only through its docstring (numpydoc with runnable examples) and one
    # check per kind of bad file, each with its own message.
    p = str(path)
    if not os.path.exists(p):
        raise TracefitInputError(f"{p}: no such file; expected the path of a PNG, TIFF, JPEG or BMP image")
    if os.path.isdir(p):
        raise TracefitInputError(f"{p}: is a directory; expected an image file")
    size = os.path.getsize(p)
    if size == 0:
        raise TracefitInputError(f"{p}: the file is empty (0 bytes); expected a PNG, TIFF, JPEG or BMP image")
    with open(p, "rb") as fh:
        data = fh.read()
    kind = _kind_from_magic(data[:16])
    if kind is None:
        raise TracefitInputError(
            f"{p}: not a recognised image (suffix {Path(p).suffix or 'none'}); expected a PNG, TIFF, JPEG or BMP file or a .npy array"
        )
    notes: list[str] = []
    if kind == "tiff":
        del data
        arr = _read_tiff(p, notes)
    elif kind == "npy":
        del data
        arr = _read_npy(p)
    else:
        _check_complete(data, kind, p)
        buf = np.frombuffer(data, np.uint8)
        with _QuietDecoders():
            arr = cv2.imdecode(buf, cv2.IMREAD_UNCHANGED)
        del buf, data
        if arr is None:
            raise TracefitInputError(f"{p}: the {kind.upper()} file could not be decoded (damaged?); expected a valid image")
        arr = _bgr_to_rgb(arr)
    if arr.size == 0 or min(arr.shape[:2]) == 0:
        raise TracefitInputError(f"{p}: the image has zero size {arr.shape}; expected at least 16 x 16 pixels")
    if arr.dtype == np.bool_:
        arr = arr.astype(np.uint8)
    if arr.dtype.kind in "ui":
        notes.insert(0, f"{arr.dtype.itemsize * 8}-bit {kind.upper()}")
    else:
        notes.insert(0, f"floating-point {kind.upper()}")
    gray = to_gray(arr, notes)
    del arr
    if gray.ndim != 2 or min(gray.shape) < 16:
        raise TracefitInputError(f"{p}: the image is {gray.shape[1]} x {gray.shape[0]} pixels; expected at least 16 x 16")
    if gray.dtype.kind == "f" and not np.isfinite(gray).all():
        if np.isinf(gray).any():
            raise TracefitInputError(f"{p}: the image contains infinite values; expected finite values (NaN marks missing points)")
        n_nan = int(np.isnan(gray).sum())
        if n_nan == gray.size:
            raise TracefitInputError(f"{p}: the image is NaN everywhere; expected some finite values")
        notes.append(f"{n_nan} NaN pixels ({100 * n_nan / gray.size:.1f} %) kept as NaN (masked by the detector)")
    return gray, notes


def read_mask(path: str | os.PathLike, shape: tuple[int, int]) -> np.ndarray:
    """Read a binary mask image (non-zero = analyse) that must match ``shape``.

    Parameters
    ----------
    path : str or Path
        Image file read as :func:`read_image` does (any format, grey or colour).
    shape : (int, int)
        (rows, columns) of the micrograph the mask belongs to.

    Returns
    -------
    ndarray of bool, ``shape``
        True where the mask's grey level is above zero.

    Raises
    ------
    TracefitInputError
        Unreadable file, or a size different from the image's.

    Examples
    --------
    >>> import os, tempfile
    >>> import cv2, numpy as np
    >>> path = os.path.join(tempfile.mkdtemp(), "mask.png")
    >>> m = np.zeros((20, 30), np.uint8)
    >>> m[:, :10] = 255
    >>> _ = cv2.imwrite(path, m)
    >>> mask = read_mask(path, (20, 30))
    >>> mask.dtype.name, int(mask.sum())
    ('bool', 200)
    """
    m, _ = read_image(path)
    if m.shape != tuple(shape):
        raise TracefitInputError(
            f"{path}: the mask is {m.shape[1]} x {m.shape[0]} pixels but the image is {shape[1]} x {shape[0]}; "
            "expected a mask of the same size"
        )
    return m > 0
