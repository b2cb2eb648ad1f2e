"""Tests of dic.images.io: image reading and writing, natural sort, sequence listing.

Oracles: OpenCV (cv2.imwrite / cv2.imread) and tifffile as independent writers and readers,
scikit-image's rgb2gray for colour conversion, and the known integer arrays the tests write.
"""

from __future__ import annotations

import os
import struct
from pathlib import Path

import cv2
import numpy as np
import pytest
import tifffile
from skimage.color import rgb2gray

from dic.images.io import (
    IMAGE_EXTENSIONS,
    MIN_IMAGE_SIZE,
    image_info,
    list_images,
    natural_sorted,
    read_image,
    write_image,
)

RNG_SEED = 20240611


def _random_image(bits, shape=(37, 53), seed=RNG_SEED):
    """Integers spanning the whole range of ``bits``, including both extremes."""
    rng = np.random.default_rng(seed)
    dtype = np.uint8 if bits == 8 else np.uint16
    top = 2**bits - 1
    img = rng.integers(0, top + 1, size=shape, dtype=np.int64).astype(dtype)
    img.flat[0], img.flat[1] = 0, top
    return img


# ------------------------------------------------------------------------------------------
# lossless round trips: values preserved exactly
# ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("bits", [8, 16])
@pytest.mark.parametrize("ext", [".png", ".tif", ".tiff"])
def test_own_writer_round_trip_is_exact(tmp_path, bits, ext):
    img = _random_image(bits)
    path = write_image(tmp_path / f"a{ext}", img.astype(np.float64), bits=bits)
    got = read_image(path)
    assert got.dtype == np.float64 and got.shape == img.shape
    # PNG and TIFF are lossless formats: every grey level must come back exactly
    np.testing.assert_array_equal(got, img.astype(np.float64))
    # independent readers (OpenCV, tifffile) see the same samples in the same dtype
    if ext == ".png":
        other = cv2.imread(str(path), cv2.IMREAD_UNCHANGED)
    else:
        other = tifffile.imread(path)
    assert other.dtype == img.dtype
    np.testing.assert_array_equal(other, img)


@pytest.mark.parametrize("bits", [8, 16])
def test_png_written_by_opencv_is_read_exactly(tmp_path, bits):
    img = _random_image(bits)
    path = tmp_path / "cv.png"
    assert cv2.imwrite(str(path), img)  # OpenCV writes 8- and 16-bit grey PNG
    np.testing.assert_array_equal(read_image(path), img.astype(np.float64))  # lossless


@pytest.mark.parametrize("bits", [8, 16])
def test_tiff_written_by_tifffile_is_read_exactly(tmp_path, bits):
    img = _random_image(bits)
    path = tmp_path / "tf.tif"
    tifffile.imwrite(path, img)
    np.testing.assert_array_equal(read_image(str(path)), img.astype(np.float64))  # lossless


def test_bmp_written_by_opencv_is_read_exactly(tmp_path):
    img = _random_image(8)
    path = tmp_path / "cv.BMP"  # upper-case extension too
    assert cv2.imwrite(str(path), img)
    np.testing.assert_array_equal(read_image(path), img.astype(np.float64))  # BMP is lossless


def test_float_and_16bit_tiff_keep_their_own_levels(tmp_path):
    # 16-bit values above 255 are not squeezed into 8 bits, floats are not rescaled
    img16 = np.array([[0, 256, 4095, 65535]] * 8 * 2, dtype=np.uint16).reshape(8, 8)
    tifffile.imwrite(tmp_path / "b.tif", img16)
    np.testing.assert_array_equal(read_image(tmp_path / "b.tif"), img16.astype(float))
    f32 = np.linspace(-3.5, 1e5, 100, dtype=np.float32).reshape(10, 10)
    tifffile.imwrite(tmp_path / "f.tif", f32)
    # float32 -> float64 is exact, so equality holds exactly
    np.testing.assert_array_equal(read_image(tmp_path / "f.tif"), f32.astype(np.float64))


def test_jpeg_grey_is_close_to_what_was_saved(tmp_path):
    # JPEG is lossy: compare with the array saved at quality 100 on a smooth image
    yy, xx = np.mgrid[0:64, 0:80]
    img = np.rint(127.5 + 100 * np.sin(xx / 9.0) * np.cos(yy / 7.0)).astype(np.uint8)
    path = tmp_path / "s.jpeg"
    assert cv2.imwrite(str(path), img, [cv2.IMWRITE_JPEG_QUALITY, 100])
    got = read_image(path)
    assert got.shape == img.shape
    # tolerance: quality-100 JPEG of a smooth 8-bit image is within a few grey levels
    # (quantisation step 1 for every DCT coefficient; common practice, no source)
    assert np.max(np.abs(got - img)) <= 3
    # and it equals OpenCV's own decoding of the file exactly (same decoder, grey path)
    np.testing.assert_array_equal(got, cv2.imread(str(path), cv2.IMREAD_UNCHANGED))


# ------------------------------------------------------------------------------------------
# colour: BT.709 luminance as in skimage.color.rgb2gray
# ------------------------------------------------------------------------------------------
def _random_rgb(bits, shape=(24, 31), seed=RNG_SEED):
    return _random_image(bits, shape=(*shape, 3), seed=seed)


# rgb2gray converts integer input to float in [0, 1] first (divides by 255 for uint8, by 65535
# for uint16), so our grey levels equal rgb2gray(rgb) * (2**bits - 1). Tolerance 1e-9 covers the
# rounding of that division and of the dot product (values below 65536, about 1e-11 each).
_RGB2GRAY_TOL = 1e-9


@pytest.mark.parametrize("bits", [8, 16])
def test_rgb_array_matches_skimage_rgb2gray(bits):
    rgb = _random_rgb(bits)
    scale = 2**bits - 1
    expected = rgb2gray(rgb) * scale  # skimage.color.rgb2gray, BT.709 weights
    np.testing.assert_allclose(read_image(rgb), expected, rtol=0, atol=_RGB2GRAY_TOL)


def test_float_rgba_array_drops_alpha_and_matches_rgb2gray():
    rgb = _random_rgb(8).astype(np.float64) * 1.7 - 20.0  # any float levels, not rescaled
    alpha = np.full(rgb.shape[:2] + (1,), 0.25)
    rgba = np.concatenate([rgb, alpha], axis=2)
    # rgb2gray leaves float input unscaled (skimage.color.rgb2gray docs)
    np.testing.assert_allclose(read_image(rgba), rgb2gray(rgb), rtol=0, atol=_RGB2GRAY_TOL)


@pytest.mark.parametrize("bits", [8, 16])
def test_colour_png_from_opencv_matches_rgb2gray(tmp_path, bits):
    rgb = _random_rgb(bits)
    path = tmp_path / "c.png"
    assert cv2.imwrite(str(path), rgb[:, :, ::-1])  # OpenCV writes B, G, R order
    expected = rgb2gray(rgb) * (2**bits - 1)  # skimage.color.rgb2gray on integer input
    np.testing.assert_allclose(read_image(path), expected, rtol=0, atol=_RGB2GRAY_TOL)


def test_rgba_png_from_opencv_drops_alpha(tmp_path):
    rgb = _random_rgb(16)
    alpha = np.full(rgb.shape[:2], 1234, dtype=np.uint16)
    bgra = np.dstack([rgb[:, :, 2], rgb[:, :, 1], rgb[:, :, 0], alpha])
    path = tmp_path / "c4.png"
    assert cv2.imwrite(str(path), bgra)
    expected = rgb2gray(rgb) * 65535  # skimage.color.rgb2gray on uint16 input
    np.testing.assert_allclose(read_image(path), expected, rtol=0, atol=_RGB2GRAY_TOL)


@pytest.mark.parametrize("planar", ["contig", "separate"])
def test_colour_tiff_from_tifffile_matches_rgb2gray(tmp_path, planar):
    rgb = _random_rgb(16)
    path = tmp_path / "c.tif"
    data = rgb if planar == "contig" else np.moveaxis(rgb, 2, 0)
    tifffile.imwrite(path, data, photometric="rgb", planarconfig=planar)
    expected = rgb2gray(rgb) * 65535  # skimage.color.rgb2gray on uint16 input
    np.testing.assert_allclose(read_image(path), expected, rtol=0, atol=_RGB2GRAY_TOL)


def test_colour_with_equal_channels_is_the_grey_exactly(tmp_path):
    grey = _random_image(8)
    path = tmp_path / "g3.png"
    assert cv2.imwrite(str(path), np.dstack([grey] * 3))
    # BT.709 weights sum to 1, so the luminance of equal channels is that channel (exact here)
    np.testing.assert_array_equal(read_image(path), grey.astype(float))


def test_colour_jpeg_matches_rgb2gray_of_opencv_decoding(tmp_path):
    rgb = _random_rgb(8, shape=(40, 48))
    path = tmp_path / "c.jpg"
    assert cv2.imwrite(str(path), rgb[:, :, ::-1])
    decoded_rgb = cv2.imread(str(path), cv2.IMREAD_UNCHANGED)[:, :, ::-1]  # OpenCV decoder
    expected = rgb2gray(decoded_rgb) * 255  # skimage.color.rgb2gray on uint8 input
    np.testing.assert_allclose(read_image(path), expected, rtol=0, atol=_RGB2GRAY_TOL)


def test_rgb_write_round_trip(tmp_path):
    rgb = _random_rgb(16)
    for ext in (".png", ".tif"):
        path = write_image(tmp_path / f"w{ext}", rgb, bits=16)
        expected = rgb2gray(rgb) * 65535  # skimage.color.rgb2gray on uint16 input
        np.testing.assert_allclose(read_image(path), expected, rtol=0, atol=_RGB2GRAY_TOL)
    # channel order on disk: tifffile must see R, G, B as given
    np.testing.assert_array_equal(tifffile.imread(tmp_path / "w.tif"), rgb)


# ------------------------------------------------------------------------------------------
# arrays
# ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("dtype", [np.uint8, np.int16, np.uint16, np.int32, np.float32])
def test_array_of_any_numeric_dtype_becomes_float64_copy(dtype):
    src = (np.arange(100).reshape(10, 10) % 50).astype(dtype)
    got = read_image(src)
    assert got.dtype == np.float64 and got.shape == (10, 10)
    np.testing.assert_array_equal(got, src.astype(np.float64))
    got[0, 0] = -1  # a copy: the caller's array is untouched
    assert src[0, 0] == 0


def test_array_with_single_channel_axis_is_grey():
    src = np.arange(81.0).reshape(9, 9, 1)
    np.testing.assert_array_equal(read_image(src), src[:, :, 0])


def test_list_of_lists_is_accepted():
    src = [[float(i + j) for j in range(8)] for i in range(8)]
    np.testing.assert_array_equal(read_image(src), np.array(src))


# ------------------------------------------------------------------------------------------
# error paths
# ------------------------------------------------------------------------------------------
def test_bool_array_rejected_with_name():
    with pytest.raises(ValueError, match=r"^reference is a boolean array; .*astype"):
        read_image(np.ones((10, 10), dtype=bool), name="reference")


def test_complex_and_text_arrays_rejected():
    with pytest.raises(ValueError, match=r"^deformed has dtype complex128"):
        read_image(np.ones((10, 10), dtype=complex), name="deformed")
    with pytest.raises(ValueError, match=r"^image has dtype <U1"):
        read_image(np.full((10, 10), "a"))


@pytest.mark.parametrize("shape", [(10, 10, 2), (10, 10, 5), (3, 10, 10)])
def test_3d_arrays_without_colour_axis_rejected(shape):
    with pytest.raises(ValueError, match=r"^frame has shape .*last axis of 3 \(RGB\) or 4"):
        read_image(np.zeros(shape), name="frame")


@pytest.mark.parametrize("shape", [(100,), (2, 10, 10, 3), ()])
def test_wrong_number_of_dimensions_rejected(shape):
    with pytest.raises(ValueError, match=r"^frame has \d dimension\(s\).*pass a 2-D"):
        read_image(np.zeros(shape), name="frame")


def test_non_finite_pixels_counted():
    img = np.zeros((12, 12))
    img[1, 2] = np.nan
    img[3, 4] = np.inf
    img[5, 6] = -np.inf
    with pytest.raises(ValueError, match=r"^reference contains 3 non-finite pixels"):
        read_image(img, name="reference")
    rgb = np.zeros((12, 12, 3))
    rgb[0, 0, :] = np.nan  # one pixel, three channels: counted once
    rgb[1, 1, 2] = np.inf
    with pytest.raises(ValueError, match=r"^image contains 2 non-finite pixels"):
        read_image(rgb)


def test_nan_in_float_tiff_rejected(tmp_path):
    img = np.zeros((10, 10), dtype=np.float32)
    img[2, 2] = np.nan
    tifffile.imwrite(tmp_path / "n.tif", img)
    with pytest.raises(ValueError, match=r"n\.tif'\) contains 1 non-finite pixels"):
        read_image(tmp_path / "n.tif", name="reference")


@pytest.mark.parametrize(
    "shape", [(0, 0), (MIN_IMAGE_SIZE - 1, 20), (20, MIN_IMAGE_SIZE - 1), (0, 10, 3)]
)
def test_empty_or_tiny_rejected(shape):
    with pytest.raises(ValueError, match=r"^reference is \d+ x \d+ pixels .* at least 8 x 8"):
        read_image(np.zeros(shape), name="reference")


def test_missing_file(tmp_path):
    path = tmp_path / "nothere.png"
    with pytest.raises(FileNotFoundError, match=r"^reference: file not found: .*nothere\.png"):
        read_image(path, name="reference")


def test_folder_given_as_file(tmp_path):
    folder = tmp_path / "frames.png"
    folder.mkdir()
    with pytest.raises(OSError, match=r"^image: .*frames\.png' is a folder.*list_images"):
        read_image(folder)


def test_unsupported_extension(tmp_path):
    path = tmp_path / "a.gif"
    path.write_bytes(b"GIF89a")
    with pytest.raises(OSError, match=r"^image: cannot read .*a\.gif'.*unsupported file type"):
        read_image(path)


@pytest.mark.parametrize("ext", [".png", ".bmp", ".jpg"])
def test_truncated_file(tmp_path, ext):
    img = _random_image(8, shape=(60, 70))
    ok, buf = cv2.imencode(ext, img)
    assert ok
    data = buf.tobytes()
    path = tmp_path / f"cut{ext}"
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(OSError, match=rf"^reference: cannot decode .*cut\{ext}'.*re-export"):
        read_image(path, name="reference")


@pytest.mark.parametrize("ext", [".png", ".tif"])
def test_not_an_image_or_empty_file(tmp_path, ext):
    path = tmp_path / f"junk{ext}"
    path.write_bytes(b"this is no picture at all" * 10)
    with pytest.raises(OSError, match=rf"^deformed: cannot decode .*junk\{ext}'"):
        read_image(path, name="deformed")
    path.write_bytes(b"")
    with pytest.raises(OSError, match=rf"^deformed: cannot decode .*junk\{ext}'"):
        read_image(path, name="deformed")


def test_truncated_tiff(tmp_path):
    path = tmp_path / "cut.tif"
    tifffile.imwrite(path, _random_image(16, shape=(200, 300)))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(OSError, match=r"^reference: cannot decode .*cut\.tif' as TIFF"):
        read_image(path, name="reference")


def test_multi_frame_tiff_rejected(tmp_path):
    path = tmp_path / "stack.tif"
    tifffile.imwrite(path, np.zeros((3, 16, 16), dtype=np.uint8), photometric="minisblack")
    with pytest.raises(OSError, match=r"^image: .*stack\.tif' holds more than one frame"):
        read_image(path)
    with pytest.raises(OSError, match=r"stack\.tif' holds more than one frame"):
        image_info(path)
    # pages appended one by one (separate images in one file) are refused too
    appended = tmp_path / "appended.tif"
    for level in range(2):
        tifffile.imwrite(appended, np.full((16, 16), level, dtype=np.uint8), append=True)
    with pytest.raises(OSError, match=r"^reference: .*appended\.tif' holds more than one frame"):
        read_image(appended, name="reference")


# ------------------------------------------------------------------------------------------
# image_info against the decoded pixels (OpenCV, tifffile as oracles)
# ------------------------------------------------------------------------------------------
def _decoded(path):
    if Path(path).suffix.lower() in (".tif", ".tiff"):
        return tifffile.imread(path)
    return cv2.imread(str(path), cv2.IMREAD_UNCHANGED)


@pytest.mark.parametrize(
    "ext, bits, channels",
    [
        (".png", 8, 1),
        (".png", 16, 1),
        (".png", 8, 3),
        (".png", 16, 4),
        (".tif", 8, 1),
        (".tiff", 16, 3),
        (".bmp", 8, 1),
        (".bmp", 8, 3),
        (".jpg", 8, 1),
        (".jpeg", 8, 3),
    ],
)
def test_image_info_matches_decoded_file(tmp_path, ext, bits, channels):
    shape = (29, 41) if channels == 1 else (29, 41, channels)
    img = _random_image(bits, shape=shape)
    path = tmp_path / f"i{ext}"
    if ext in (".tif", ".tiff"):
        tifffile.imwrite(path, img, photometric="rgb" if channels == 3 else "minisblack")
    else:
        assert cv2.imwrite(str(path), img)
    info = image_info(path)
    dec = _decoded(path)  # OpenCV / tifffile full decoding is the reference
    assert info["shape"] == dec.shape[:2] == (29, 41)
    assert info["channels"] == (1 if dec.ndim == 2 else dec.shape[2]) == channels
    assert info["dtype"] == dec.dtype.name
    assert info["bits"] == bits
    assert info["path"] == path
    assert read_image(path).shape == info["shape"]


def test_image_info_png_header_fields(tmp_path):
    # PNG IHDR: width and height are big-endian 4-byte integers at bytes 16..23, bit depth at
    # byte 24 (PNG specification, W3C 2003, section 11.2.2; from memory)
    path = tmp_path / "h.png"
    assert cv2.imwrite(str(path), _random_image(16, shape=(17, 300)))
    width, height, depth = struct.unpack(">IIB", path.read_bytes()[16:25])
    info = image_info(path)
    assert info["shape"] == (height, width) == (17, 300)
    assert info["bits"] == depth == 16


def test_image_info_errors(tmp_path):
    with pytest.raises(FileNotFoundError, match=r"^path: file not found: .*none\.tif"):
        image_info(tmp_path / "none.tif")
    bad = tmp_path / "bad.png"
    bad.write_bytes(b"not a png file at all, really not" * 2)
    with pytest.raises(OSError, match=r"^path: .*bad\.png' does not start with a PNG header"):
        image_info(bad)
    badj = tmp_path / "bad.jpg"
    badj.write_bytes(b"\xff\xd8\xff\xe0\x00")
    with pytest.raises(OSError, match=r"^path: .*bad\.jpg' ends before its JPEG frame header"):
        image_info(badj)


# ------------------------------------------------------------------------------------------
# writer
# ------------------------------------------------------------------------------------------
def test_write_rounds_and_clips(tmp_path):
    values = np.array([-3.7, -0.5, 0.5, 1.5, 2.49, 254.5, 255.4, 300.0, 1e9] * 8).reshape(8, 9)
    path = write_image(tmp_path / "r.png", values, bits=8)
    # expected by hand: round half to even (IEEE 754 default rounding), clip to 0..255
    row = np.array([0, 0, 0, 2, 2, 254, 255, 255, 255], dtype=np.uint8)
    np.testing.assert_array_equal(cv2.imread(str(path), cv2.IMREAD_UNCHANGED), np.tile(row, (8, 1)))
    path16 = write_image(tmp_path / "r.tif", values * 300, bits=16)
    expected16 = np.array([0, 0, 150, 450, 747, 65535, 65535, 65535, 65535], dtype=np.uint16)
    np.testing.assert_array_equal(tifffile.imread(path16), np.tile(expected16, (8, 1)))


def test_write_errors(tmp_path):
    img = np.zeros((10, 10))
    with pytest.raises(ValueError, match=r"^bits must be 8 or 16, got 12"):
        write_image(tmp_path / "a.png", img, bits=12)
    with pytest.raises(OSError, match=r"^path: cannot write .*a\.jpg'.*unsupported"):
        write_image(tmp_path / "a.jpg", img)
    with pytest.raises(ValueError, match=r"^array contains NaN or inf"):
        write_image(tmp_path / "a.png", np.full((10, 10), np.nan))
    with pytest.raises(ValueError, match=r"^array has shape \(10, 10, 2\)"):
        write_image(tmp_path / "a.png", np.zeros((10, 10, 2)))
    with pytest.raises(FileNotFoundError, match=r"^path: folder .*nofolder' does not exist"):
        write_image(tmp_path / "nofolder" / "a.png", img)


# ------------------------------------------------------------------------------------------
# natural sort and sequence listing
# ------------------------------------------------------------------------------------------
# expected orders below are written by hand: numbers compared as integers, case ignored, the
# order a file manager shows (common practice, no source)
@pytest.mark.parametrize(
    "given, expected",
    [
        (["img10.png", "img2.png", "img1.png"], ["img1.png", "img2.png", "img10.png"]),
        (["IMG_3.tif", "img_20.tif", "Img_100.tif"], ["IMG_3.tif", "img_20.tif", "Img_100.tif"]),
        (["b", "A", "c"], ["A", "b", "c"]),
        (["run2_f10", "run10_f1", "run2_f9"], ["run2_f9", "run2_f10", "run10_f1"]),
        (["x007", "x7", "x06"], ["x06", "x007", "x7"]),
        (["10", "9", "a", "1a"], ["1a", "9", "10", "a"]),
        ([], []),
    ],
)
def test_natural_sorted_examples(given, expected):
    assert natural_sorted(given) == expected


def test_natural_sorted_paths_and_large_numbers():
    paths = [Path("s/frame_12345678901234567890.png"), Path("s/frame_999.png")]
    # ints of any size (a string comparison would put "1..." before "9...")
    assert natural_sorted(paths) == paths[::-1]
    assert all(isinstance(p, Path) for p in natural_sorted(paths))


def test_list_images_folder(tmp_path):
    names = ["img10.png", "img2.TIF", "img1.jpeg", "IMG3.Bmp", "img11.tiff", "img4.JPG"]
    for n in names:
        (tmp_path / n).write_bytes(b"x")
    (tmp_path / "notes.txt").write_text("not an image")
    (tmp_path / "force.csv").write_text("0,0")
    (tmp_path / "sub.png").mkdir()  # a folder named like an image is not a file
    (tmp_path / "sub.png" / "img0.png").write_bytes(b"x")  # sub-folders are not searched
    got = list_images(tmp_path)
    expected = ["img1.jpeg", "img2.TIF", "IMG3.Bmp", "img4.JPG", "img10.png", "img11.tiff"]
    assert [p.name for p in got] == expected  # natural order by hand
    assert all(isinstance(p, Path) and p.parent == tmp_path for p in got)
    assert list_images(str(tmp_path)) == got
    assert {p.suffix.lower() for p in got} <= set(IMAGE_EXTENSIONS)


def test_list_images_glob(tmp_path):
    for n in ["a_1.tif", "a_10.tif", "a_9.tif", "b_1.tif", "a_5.txt"]:
        (tmp_path / n).write_bytes(b"x")
    got = list_images(os.path.join(str(tmp_path), "a_*"))
    assert [p.name for p in got] == ["a_1.tif", "a_9.tif", "a_10.tif"]
    (tmp_path / "deep").mkdir()
    (tmp_path / "deep" / "a_2.tif").write_bytes(b"x")
    got = list_images(os.path.join(str(tmp_path), "**", "a_*.tif"))
    assert [p.name for p in got] == ["a_1.tif", "a_9.tif", "a_10.tif", "a_2.tif"]


def test_list_images_nothing_found(tmp_path):
    (tmp_path / "readme.txt").write_text("x")
    with pytest.raises(FileNotFoundError, match=r"^pattern_or_folder: folder .* holds no image"):
        list_images(tmp_path)
    pattern = os.path.join(str(tmp_path), "frame_*.png")
    with pytest.raises(FileNotFoundError, match=r"^pattern_or_folder: .*frame_\*\.png': no image"):
        list_images(pattern)
    with pytest.raises(FileNotFoundError, match=r"^pattern_or_folder: .*missing': no such"):
        list_images(tmp_path / "missing")
