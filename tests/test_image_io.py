"""Reading micrographs: formats, bit depths, colour, multi-page TIFF, bad input."""

import cv2
import numpy as np
import pytest
import tifffile

from tracefit.errors import TracefitInputError
from tracefit.image import read_image, read_mask


@pytest.fixture
def gray8():
    rng = np.random.default_rng(0)
    return rng.integers(0, 256, (40, 50), dtype=np.uint8)


@pytest.mark.parametrize("suffix", [".png", ".bmp", ".tif"])
def test_lossless_8bit_round_trip(tmp_path, gray8, suffix):
    p = tmp_path / f"a{suffix}"
    assert cv2.imwrite(str(p), gray8)
    g, notes = read_image(p)
    assert g.dtype == np.float32 and g.shape == (40, 50)
    assert np.array_equal(g, gray8.astype(np.float32))
    assert any("8-bit" in n for n in notes)


def test_jpeg_reads_close_to_original(tmp_path, gray8):
    smooth = cv2.GaussianBlur(gray8, (0, 0), 3)
    p = tmp_path / "a.jpg"
    cv2.imwrite(str(p), smooth, [cv2.IMWRITE_JPEG_QUALITY, 95])
    g, _ = read_image(p)
    assert np.abs(g - smooth).mean() < 2.0


def test_16bit_png_and_tiff_keep_full_precision(tmp_path):
    a = (np.arange(40 * 50, dtype=np.uint32) * 29 % 65536).astype(np.uint16).reshape(40, 50)
    cv2.imwrite(str(tmp_path / "a.png"), a)
    tifffile.imwrite(tmp_path / "a.tif", a)
    for name in ("a.png", "a.tif"):
        g, notes = read_image(tmp_path / name)
        assert np.array_equal(g.astype(np.int64), a.astype(np.int64))  # odd values survive: no 8-bit rounding
        assert any("16-bit" in n for n in notes)


def test_rgb_becomes_rec601_luminance(tmp_path):
    rgb = np.zeros((20, 30, 3), np.uint8)
    rgb[..., 0], rgb[..., 1], rgb[..., 2] = 200, 100, 50
    tifffile.imwrite(tmp_path / "c.tif", rgb, photometric="rgb")
    cv2.imwrite(str(tmp_path / "c.png"), rgb[..., ::-1])  # OpenCV writes BGR
    # ITU-R BT.601 luma: 0.299 R + 0.587 G + 0.114 B
    expect = 0.299 * 200 + 0.587 * 100 + 0.114 * 50
    for name in ("c.tif", "c.png"):
        g, notes = read_image(tmp_path / name)
        assert g.shape == (20, 30)
        assert np.allclose(g, expect, atol=1e-3)
        assert any("luminance" in n for n in notes)


def test_rgba_alpha_ignored(tmp_path):
    rgba = np.full((20, 20, 4), 90, np.uint8)
    rgba[..., 3] = 10
    cv2.imwrite(str(tmp_path / "d.png"), rgba)
    g, notes = read_image(tmp_path / "d.png")
    assert np.allclose(g, 90) and any("alpha" in n for n in notes)


def test_multipage_tiff_first_page_with_note(tmp_path):
    pages = np.stack([np.full((20, 24), v, np.uint16) for v in (1000, 2000, 3000)])
    pages[0, 0, 0] = 7
    tifffile.imwrite(tmp_path / "m.tif", pages, photometric="minisblack")
    g, notes = read_image(tmp_path / "m.tif")
    assert g.shape == (20, 24) and g[1, 1] == 1000 and g[0, 0] == 7
    assert any("3 pages" in n and "first page" in n for n in notes)


def test_bad_inputs_raise_clear_errors(tmp_path, gray8):
    with pytest.raises(TracefitInputError, match="no such file"):
        read_image(tmp_path / "missing.png")
    (tmp_path / "empty.png").write_bytes(b"")
    with pytest.raises(TracefitInputError, match="empty"):
        read_image(tmp_path / "empty.png")
    (tmp_path / "text.png").write_text("not an image at all")
    with pytest.raises(TracefitInputError, match="not a recognised image"):
        read_image(tmp_path / "text.png")
    for suffix in (".png", ".jpg", ".bmp", ".tif"):
        full = tmp_path / f"full{suffix}"
        cv2.imwrite(str(full), gray8)
        data = full.read_bytes()
        cut = tmp_path / f"cut{suffix}"
        cut.write_bytes(data[: len(data) // 2])
        with pytest.raises(TracefitInputError):
            read_image(cut)
    with pytest.raises(TracefitInputError, match="directory"):
        read_image(tmp_path)


def test_mask_must_match_size(tmp_path, gray8):
    cv2.imwrite(str(tmp_path / "m.png"), (gray8 > 128).astype(np.uint8) * 255)
    m = read_mask(tmp_path / "m.png", (40, 50))
    assert m.dtype == bool and np.array_equal(m, gray8 > 128)
    with pytest.raises(TracefitInputError, match="same size"):
        read_mask(tmp_path / "m.png", (41, 50))
