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


# --- float maps: .npy and floating-point TIFF, NaN kept (issue 13) -------------------------


def _strain_map_with_holes():
    """A 200 x 300 strain-like float field (numpy only, see tests/test_detect_strainmaps.py).

    Six grains of 100 x 100 px, each with bright thin bands of its own angle, and two
    NaN holes; returns (field, {(row0, col0): angle_deg}).
    """
    from tests.test_detect_strainmaps import band_field

    field = np.zeros((200, 300), np.float32)
    truth = {}
    angles = iter([15.0, 60.0, 105.0, 150.0, 40.0, 125.0])
    for r0 in (0, 100):
        for c0 in (0, 100, 200):
            ang = next(angles)
            truth[(r0, c0)] = ang
            field[r0 : r0 + 100, c0 : c0 + 100] = band_field((100, 100), [(ang, 9.0)], seed=int(r0 + c0))
    field[40:52, 30:60] = np.nan  # failed correlation
    field[130:140, 150:290] = np.nan
    return field, truth


def _write_float_map(tmp_path, field, kind):
    import tifffile

    path = tmp_path / f"strain.{kind}"
    if kind == "npy":
        np.save(path, field.astype(np.float64))
    else:
        tifffile.imwrite(path, field.astype(np.float32))
    return path


@pytest.mark.parametrize("kind", ["npy", "tif"])
def test_float_map_keeps_values_and_nan(tmp_path, kind):
    field, _ = _strain_map_with_holes()
    gray, notes = read_image(_write_float_map(tmp_path, field, kind))
    assert gray.dtype == np.float32 and gray.shape == field.shape
    # no rescaling: the strain values come back as written (float32 precision)
    ok = ~np.isnan(field)
    assert np.allclose(gray[ok], field[ok], rtol=1e-6, atol=0)
    assert np.array_equal(np.isnan(gray), ~ok)
    assert any("NaN" in n for n in notes)


@pytest.mark.parametrize("kind", ["npy", "tif"])
def test_float_map_read_from_file_gives_each_small_grains_family(tmp_path, kind):
    """Bands of the drawn angle (image frame, tracefit.conventions) in grains of 100 x 100 px."""
    from tracefit.conventions import axial_difference
    from tracefit.image import detect_bands

    field, truth = _strain_map_with_holes()
    gray, notes = read_image(_write_float_map(tmp_path, field, kind))
    found = 0
    for (r0, c0), ang in truth.items():
        m = np.zeros(gray.shape, bool)
        m[r0 : r0 + 100, c0 : c0 + 100] = True
        res = detect_bands(gray, mask=m, notes=notes)
        assert all(np.isfinite([f.angle_deg for f in res.families]))
        found += any(abs(axial_difference(f.angle_deg, ang)) <= 1.0 for f in res.families)
        assert all(f.polarity == "bright" for f in res.families)
    assert found >= 5


def test_infinite_values_in_a_float_map_are_refused(tmp_path):
    field = np.ones((32, 32))
    field[3, 3] = np.inf
    np.save(tmp_path / "bad.npy", field)
    with pytest.raises(TracefitInputError, match="infinite"):
        read_image(tmp_path / "bad.npy")


def test_overlay_of_a_float_map_with_nan_shows_holes_black(tmp_path):
    from tracefit.image import detect_bands, draw_detection

    field, _ = _strain_map_with_holes()
    gray, _ = read_image(_write_float_map(tmp_path, field, "npy"))
    rgb = draw_detection(gray, detect_bands(gray), legend=False)
    assert rgb.dtype == np.uint8 and rgb.shape == field.shape + (3,)
    assert (rgb[44, 40] == 0).all()  # inside the hole [40:52, 30:60]
    assert rgb[~np.isnan(field)].max() > 100  # the rest keeps its stretch
