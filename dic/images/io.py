"""Reading and writing images, and finding image sequences on disk.

Images come back as 2-D float64 arrays in the file's own grey levels (0..255 for 8-bit files,
0..65535 for 16-bit files); nothing is normalised, so intensities keep their meaning for noise
and contrast figures. Colour is reduced to luminance with the ITU-R BT.709 weights that
:func:`skimage.color.rgb2gray` uses.

Only this module (and the results-file and command-line modules) touch files.
"""

from __future__ import annotations

import glob
import os
import re
import struct
from pathlib import Path

import numpy as np

from dic.errors import ImageError

__all__ = [
    "IMAGE_EXTENSIONS",
    "MIN_IMAGE_SIZE",
    "image_info",
    "list_images",
    "natural_sorted",
    "read_image",
    "write_image",
]

#: file name endings read as images (compared case-insensitively)
IMAGE_EXTENSIONS = (".png", ".tif", ".tiff", ".bmp", ".jpg", ".jpeg")
#: smallest accepted image side, in pixels
MIN_IMAGE_SIZE = 8

# ITU-R BT.709 luma weights for linear R, G, B, the weights skimage.color.rgb2gray uses
_LUMA_WEIGHTS = (0.2125, 0.7154, 0.0721)
_TIFF_EXTENSIONS = (".tif", ".tiff")
_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


# --------------------------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------------------------
def read_image(source, *, name="image"):
    """Read an image into a 2-D float64 array of grey levels.

    Parameters
    ----------
    source : str, os.PathLike or array_like
        A file (PNG, TIFF, BMP or JPEG, 8 or 16 bits per sample, grey or colour) or an array.
        Arrays may be 2-D (grey) or 3-D with a last axis of 3 (RGB) or 4 (RGBA, alpha ignored);
        a last axis of 1 is taken as grey. Colour arrays are in R, G, B order (as from
        scikit-image or matplotlib; convert OpenCV's B, G, R arrays first). Any real numeric
        dtype is accepted; booleans are not.
    name : str, optional
        What the image is called in error messages, e.g. ``"reference"``.

    Returns
    -------
    image : ndarray of float64, shape (rows, cols)
        A new array (never a view of ``source``) holding the file's own grey levels, e.g.
        0..255 for 8-bit and 0..65535 for 16-bit files. Colour becomes luminance
        ``0.2125 R + 0.7154 G + 0.0721 B``; an image whose colour channels are all equal is
        returned as that channel exactly.

    Raises
    ------
    OSError
        The file is missing, of an unsupported type, damaged or truncated, or holds more than
        one frame.
    ValueError
        The array has the wrong number of dimensions or channels, a boolean or non-numeric
        dtype, non-finite pixels, or fewer than ``MIN_IMAGE_SIZE`` pixels along a side.

    Notes
    -----
    Non-TIFF files are decoded by OpenCV with ``IMREAD_UNCHANGED`` (full bit depth, alpha kept
    and then dropped here, no EXIF rotation applied: pixels come in the order stored). TIFF
    files are read with tifffile; a TIFF must hold a single frame.

    References
    ----------
    .. [1] ITU-R Recommendation BT.709-6, "Parameter values for the HDTV standards for
       production and international programme exchange" (2015), item 3.2 (luma weights).
    """
    if isinstance(source, (str, os.PathLike)):
        raw = _read_file(Path(source), name)
        where = f"{name} ('{Path(source)}')"
        if raw.ndim == 3:
            raw = _file_channels_to_rgb(raw, where)
    else:
        raw = _check_array(source, name)
        where = name
    grey = _to_grey(raw)
    # a 2-D array was already checked to be finite, and copying to float64 keeps it so
    # (unless it held wider floats)
    _check_grey(grey, where, finite_known=not isinstance(source, (str, os.PathLike))
                and raw.ndim == 2 and raw.dtype.itemsize <= 8)
    return grey


def image_info(path):
    """Describe an image file without decoding its pixels where the format allows.

    PNG and JPEG headers and TIFF tags are parsed directly; BMP files (and JPEG variants
    whose header is not understood) are decoded.

    Parameters
    ----------
    path : str or os.PathLike
        An image file of a type in ``IMAGE_EXTENSIONS``.

    Returns
    -------
    info : dict
        ``path`` (Path), ``format`` (``"png"``, ``"tiff"``, ``"bmp"``, ``"jpeg"``),
        ``shape`` ((rows, cols)), ``channels`` (samples per pixel stored in the file: 1 grey,
        2 grey + alpha, 3 colour, 4 colour + alpha; palette PNGs count as 3), ``dtype`` (numpy
        dtype name of the decoded samples, e.g. ``"uint8"``, ``"uint16"``) and ``bits`` (bits
        per sample stored in the file).

    Raises
    ------
    OSError
        The file is missing, of an unsupported type, or its header cannot be read.
    """
    p = Path(path)
    fmt = _check_file(p, "path")
    try:
        if fmt == "tiff":
            return _tiff_info(p)
        if fmt == "png":
            return _png_info(p)
        if fmt == "jpeg":
            info = _jpeg_info(p)
            if info is not None:
                return info
    except OSError:
        raise
    except Exception as exc:  # a header parser met a malformed file
        raise ImageError(
            f"path: cannot read the header of '{p}' ({_one_line(exc)}); check that it is an intact "
            f"{fmt.upper()} file"
        ) from None
    # BMP, unusual JPEG: decode fully
    raw = _read_file(p, "path")
    return {
        "path": p,
        "format": fmt,
        "shape": (int(raw.shape[0]), int(raw.shape[1])),
        "channels": 1 if raw.ndim == 2 else int(raw.shape[2]),
        "dtype": raw.dtype.name,
        "bits": raw.dtype.itemsize * 8,
    }


def _one_line(exc):
    """An exception's text on one line, for messages that quote a library's error."""
    return " ".join(str(exc).split()) or type(exc).__name__


def _format_of(p):
    ext = p.suffix.lower()
    if ext in _TIFF_EXTENSIONS:
        return "tiff"
    if ext in (".jpg", ".jpeg"):
        return "jpeg"
    if ext in (".png", ".bmp"):
        return ext[1:]
    return None


def _check_file(p, name):
    """Return the format of file ``p`` or raise OSError naming it and the fix."""
    fmt = _format_of(p)
    if fmt is None:
        shown = p.suffix or "(no extension)"
        raise ImageError(
            f"{name}: cannot read '{p}': unsupported file type {shown}; convert it to PNG or "
            f"TIFF (accepted: {', '.join(IMAGE_EXTENSIONS)})"
        )
    if not p.exists():
        raise FileNotFoundError(
            f"{name}: file not found: '{p}'; check the path and the working folder"
        )
    if p.is_dir():
        raise IsADirectoryError(
            f"{name}: '{p}' is a folder, not an image file; give one image file, or use "
            f"list_images() for a folder"
        )
    return fmt


def _quiet_decode(cv2, data):
    """``cv2.imdecode`` with the C library's own complaints kept off the terminal.

    libpng and libjpeg print their error (``libpng error: ...``) straight to file
    descriptor 2 before OpenCV returns None; the caller reports the damage in its own words,
    so descriptor 2 is pointed at the null device for the decode and restored after.
    """
    import sys

    try:
        sys.stderr.flush()
        saved = os.dup(2)
    except (OSError, ValueError, AttributeError):  # no descriptor 2 to guard
        return cv2.imdecode(data, cv2.IMREAD_UNCHANGED)
    try:
        null = os.open(os.devnull, os.O_WRONLY)
        try:
            os.dup2(null, 2)
        finally:
            os.close(null)
        return cv2.imdecode(data, cv2.IMREAD_UNCHANGED)
    finally:
        os.dup2(saved, 2)
        os.close(saved)


def _read_file(p, name):
    """Decode file ``p`` into its raw samples: (rows, cols) or (rows, cols, channels)."""
    fmt = _check_file(p, name)
    if fmt == "tiff":
        return _read_tiff(p, name)

    import cv2

    try:
        data = np.fromfile(p, dtype=np.uint8)  # via numpy: safe for non-ASCII paths
    except OSError as exc:
        raise ImageError(
            f"{name}: cannot read '{p}' ({exc.strerror or exc}); check the file permissions"
        ) from None
    raw = _quiet_decode(cv2, data) if data.size else None
    if raw is None:
        raise ImageError(
            f"{name}: cannot decode '{p}' as {fmt.upper()} (damaged, truncated or not really "
            f"{fmt.upper()}); re-export or re-copy the image"
        )
    if raw.ndim == 3:
        # OpenCV gives B, G, R(, A); put colour in R, G, B(, A) order
        if raw.shape[2] == 3:
            raw = raw[:, :, ::-1]
        elif raw.shape[2] == 4:
            raw = raw[:, :, [2, 1, 0, 3]]
    return raw


def _tiff_layout(tif, p, name):
    """Rows, cols, channels of the one image in a TIFF, or OSError if it holds several."""
    if len(tif.series) > 1:
        raise ImageError(
            f"{name}: '{p}' holds more than one frame ({len(tif.series)} images); save one "
            f"frame per file"
        )
    series = tif.series[0]
    shape = tuple(int(s) for s in series.shape)
    axes = series.axes
    extra = [(a, s) for a, s in zip(axes, shape) if a not in "YXS" and s > 1]
    if extra or "Y" not in axes or "X" not in axes:
        raise ImageError(
            f"{name}: '{p}' holds more than one frame (axes {axes}, shape {shape}); save one "
            f"frame per file"
        )
    rows, cols = shape[axes.index("Y")], shape[axes.index("X")]
    channels = shape[axes.index("S")] if "S" in axes else 1
    return rows, cols, channels


def _read_tiff(p, name):
    import tifffile

    try:
        with tifffile.TiffFile(p) as tif:
            _tiff_layout(tif, p, name)
            series = tif.series[0]
            raw = series.asarray()
            axes = series.axes
    except ImageError:
        raise
    except OSError as exc:
        raise ImageError(f"{name}: cannot read TIFF '{p}' ({_one_line(exc)}); check the file") from None
    except Exception as exc:  # tifffile raises ValueError subclasses for damaged files
        raise ImageError(
            f"{name}: cannot decode '{p}' as TIFF ({_one_line(exc)}); the file is damaged, truncated or "
            f"not a TIFF: re-export or re-copy it"
        ) from None
    # other axes all have length 1 here (checked by _tiff_layout): drop them, order Y, X, S
    drop = tuple(i for i, a in enumerate(axes) if a not in "YXS")
    if drop:
        raw = raw.squeeze(axis=drop)
        axes = "".join(a for a in axes if a in "YXS")
    return np.transpose(raw, [axes.index(a) for a in "YXS" if a in axes])


def _tiff_info(p):
    import tifffile

    try:
        with tifffile.TiffFile(p) as tif:
            rows, cols, channels = _tiff_layout(tif, p, "path")
            series = tif.series[0]
            dtype = np.dtype(series.dtype)
            bits = int(tif.pages[0].bitspersample)
    except ImageError:
        raise
    except OSError as exc:
        raise ImageError(f"path: cannot read TIFF '{p}' ({_one_line(exc)}); check the file") from None
    except Exception as exc:
        raise ImageError(
            f"path: cannot read the header of '{p}' as TIFF ({_one_line(exc)}); check that it is an "
            f"intact TIFF file"
        ) from None
    return {
        "path": p,
        "format": "tiff",
        "shape": (rows, cols),
        "channels": channels,
        "dtype": dtype.name,
        "bits": bits,
    }


def _png_info(p):
    with open(p, "rb") as f:
        head = f.read(33)
    if len(head) < 33 or head[:8] != _PNG_SIGNATURE or head[12:16] != b"IHDR":
        raise ImageError(
            f"path: '{p}' does not start with a PNG header; check that it is an intact PNG file"
        )
    width, height, depth, colour = struct.unpack(">IIBB", head[16:26])
    channels = {0: 1, 2: 3, 3: 3, 4: 2, 6: 4}.get(colour)
    if channels is None:
        raise ImageError(f"path: '{p}' has an unknown PNG colour type {colour}; re-export it")
    return {
        "path": p,
        "format": "png",
        "shape": (int(height), int(width)),
        "channels": channels,
        "dtype": "uint16" if depth == 16 else "uint8",
        "bits": int(depth),
    }


# start-of-frame markers of JPEG (ITU-T T.81, Table B.1): C0-CF except C4 (DHT), C8, CC (DAC)
_JPEG_SOF = {0xC0, 0xC1, 0xC2, 0xC3, 0xC5, 0xC6, 0xC7, 0xC9, 0xCA, 0xCB, 0xCD, 0xCE, 0xCF}


def _jpeg_info(p):
    """Parse the JPEG frame header; None when it is not a plain 8-bit grey or colour JPEG."""
    with open(p, "rb") as f:
        if f.read(2) != b"\xff\xd8":
            raise ImageError(
                f"path: '{p}' does not start with a JPEG marker; check that it is an intact "
                f"JPEG file"
            )
        while True:
            b = f.read(1)
            if not b:
                raise ImageError(f"path: '{p}' ends before its JPEG frame header; re-copy it")
            if b != b"\xff":
                continue
            marker = f.read(1)
            while marker == b"\xff":  # fill bytes
                marker = f.read(1)
            if not marker:
                raise ImageError(f"path: '{p}' ends before its JPEG frame header; re-copy it")
            m = marker[0]
            if m == 0x01 or 0xD0 <= m <= 0xD8:  # markers without a length
                continue
            if m in (0xD9, 0xDA):  # end of image or start of scan before any frame header
                return None
            seg = f.read(2)
            if len(seg) < 2:
                raise ImageError(f"path: '{p}' ends before its JPEG frame header; re-copy it")
            (length,) = struct.unpack(">H", seg)
            if m in _JPEG_SOF:
                body = f.read(6)
                if len(body) < 6:
                    raise ImageError(f"path: '{p}' ends inside its JPEG frame header; re-copy it")
                precision, height, width, ncomp = struct.unpack(">BHHB", body)
                if precision != 8 or ncomp not in (1, 3) or height == 0:
                    return None
                return {
                    "path": p,
                    "format": "jpeg",
                    "shape": (int(height), int(width)),
                    "channels": int(ncomp),
                    "dtype": "uint8",
                    "bits": 8,
                }
            f.seek(length - 2, os.SEEK_CUR)


def _file_channels_to_rgb(raw, where):
    """Bring a decoded multi-channel file to grey (2-D) or RGB(A) order for _to_grey."""
    c = raw.shape[2]
    if c == 1:
        return raw[:, :, 0]
    if c == 2:  # grey + alpha
        return raw[:, :, 0]
    if c in (3, 4):
        return raw
    raise ImageError(
        f"{where} has {c} samples per pixel; save it as grey, RGB or RGBA (1, 3 or 4 samples)"
    )


def _check_array(source, name):
    """Validate an array given directly; return it as an ndarray (not yet copied)."""
    try:
        arr = np.asarray(source)
    except Exception as exc:
        raise ValueError(
            f"{name}: cannot turn {type(source).__name__} into an array ({_one_line(exc)}); pass a file "
            f"path or a 2-D numeric array"
        ) from None
    if arr.dtype == bool:
        raise ValueError(
            f"{name} is a boolean array; pass grey levels, e.g. {name}.astype(float) * 255"
        )
    if arr.dtype.kind not in "uif":
        raise ValueError(
            f"{name} has dtype {arr.dtype}, not a real number type; pass a file path or a "
            f"numeric array (integer or float)"
        )
    if arr.ndim == 3:
        c = arr.shape[2]
        if c == 1:
            arr = arr[:, :, 0]
        elif c not in (3, 4):
            raise ValueError(
                f"{name} has shape {arr.shape}: a 3-D image needs a last axis of 3 (RGB) or 4 "
                f"(RGBA); for a stack of frames pass one frame, e.g. {name}[0]"
            )
    elif arr.ndim != 2:
        raise ValueError(
            f"{name} has {arr.ndim} dimension(s), shape {arr.shape}; pass a 2-D grey image "
            f"(rows, cols) or an RGB(A) image (rows, cols, 3 or 4)"
        )
    bad = None
    # a sum is finite when every pixel is (one pass, no mask); only when it is not (or the
    # sum overflowed) are the pixels counted
    with np.errstate(over="ignore", invalid="ignore"):
        total = np.sum(arr, dtype=np.float64) if arr.dtype.kind == "f" else 0.0
    if not np.isfinite(total):
        if arr.ndim == 3:
            bad = ~np.isfinite(arr[:, :, :3]).all(axis=2)
        else:
            bad = ~np.isfinite(arr)
    if bad is not None:
        n = int(np.count_nonzero(bad))
        if n:
            raise ValueError(
                f"{name} contains {n} non-finite pixels (NaN or inf); replace them, e.g. with "
                f"np.nan_to_num, or crop them away"
            )
    return arr


def _to_grey(raw):
    """New float64 (rows, cols) array from grey (2-D) or RGB(A) samples."""
    if raw.ndim == 2:
        return np.array(raw, dtype=np.float64, order="C")
    r, g, b = raw[:, :, 0], raw[:, :, 1], raw[:, :, 2]
    if np.array_equal(r, g) and np.array_equal(g, b):
        return np.array(r, dtype=np.float64, order="C")
    wr, wg, wb = _LUMA_WEIGHTS
    grey = wr * r.astype(np.float64)
    grey += wg * g
    grey += wb * b
    return grey


def _check_grey(grey, where, finite_known=False):
    rows, cols = grey.shape
    if rows < MIN_IMAGE_SIZE or cols < MIN_IMAGE_SIZE:
        raise ValueError(
            f"{where} is {rows} x {cols} pixels (rows x cols); images need at least "
            f"{MIN_IMAGE_SIZE} x {MIN_IMAGE_SIZE} pixels: pass the whole image, not a crop"
        )
    n = 0 if finite_known else grey.size - int(np.count_nonzero(np.isfinite(grey)))
    if n:  # NaN/inf stored in a float file, or colour samples whose weighted sum overflowed
        raise ValueError(
            f"{where} contains {n} non-finite pixels (NaN or inf); replace them, e.g. with "
            f"np.nan_to_num, crop them away, or rescale the image"
        )


# --------------------------------------------------------------------------------------------
# writing
# --------------------------------------------------------------------------------------------
def write_image(path, array, *, bits=8):
    """Write a grey or RGB image as an 8- or 16-bit PNG or TIFF file.

    Values are rounded to the nearest integer (halves to even, :func:`numpy.rint`) and clipped
    to ``0 .. 2**bits - 1``.

    Parameters
    ----------
    path : str or os.PathLike
        Output file ending in ``.png``, ``.tif`` or ``.tiff``. Its folder must exist.
    array : array_like
        2-D grey levels, or (rows, cols, 3) in R, G, B order. Must be finite.
    bits : {8, 16}, optional
        Bits per sample in the file.

    Returns
    -------
    path : pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        Bad ``bits``, array shape, dtype or non-finite values.
    OSError
        Unsupported file type, missing folder, or the file cannot be written.
    """
    p = Path(path)
    if bits not in (8, 16) or isinstance(bits, bool):
        raise ValueError(f"bits must be 8 or 16, got {bits!r}; pass bits=8 or bits=16")
    ext = p.suffix.lower()
    if ext not in (".png",) + _TIFF_EXTENSIONS:
        raise ImageError(
            f"path: cannot write '{p}': unsupported file type {ext or '(no extension)'}; use "
            f".png, .tif or .tiff"
        )
    arr = np.asarray(array)
    if arr.dtype.kind not in "buif":
        raise ValueError(f"array has dtype {arr.dtype}; pass a numeric array of grey levels")
    if not (arr.ndim == 2 or (arr.ndim == 3 and arr.shape[2] == 3)):
        raise ValueError(
            f"array has shape {arr.shape}; pass a 2-D grey image or a (rows, cols, 3) RGB image"
        )
    if arr.size == 0:
        raise ValueError(f"array has shape {arr.shape} with no pixels; pass a non-empty image")
    if arr.dtype.kind == "f" and not np.isfinite(arr).all():
        raise ValueError("array contains NaN or inf; replace them (e.g. np.nan_to_num) first")
    dtype = np.uint8 if bits == 8 else np.uint16
    top = 2**bits - 1
    if arr.dtype.kind == "f":
        data = np.clip(np.rint(arr), 0, top).astype(dtype)
    else:
        data = np.clip(arr.astype(np.int64), 0, top).astype(dtype)
    if not p.parent.is_dir():
        raise FileNotFoundError(
            f"path: folder '{p.parent}' does not exist; create it before writing '{p.name}'"
        )
    from dic.files import atomic_write

    try:
        if ext == ".png":
            import cv2

            bgr = data[:, :, ::-1] if data.ndim == 3 else data
            ok, buf = cv2.imencode(".png", np.ascontiguousarray(bgr))
            if not ok:
                raise ImageError("OpenCV could not encode the PNG")
            with atomic_write(p, "wb") as fh:  # never half an image
                fh.write(buf.tobytes())
        else:
            import tifffile

            with atomic_write(p, "wb") as fh:
                tifffile.imwrite(fh, data,
                                 photometric="rgb" if data.ndim == 3 else "minisblack")
    except OSError as exc:
        from dic.files import write_error

        raise write_error(p, exc) from None
    return p


# --------------------------------------------------------------------------------------------
# sequences
# --------------------------------------------------------------------------------------------
_DIGITS = re.compile(r"(\d+)")


def _natural_key(item):
    s = os.fspath(item) if isinstance(item, os.PathLike) else str(item)
    parts = _DIGITS.split(s.casefold())
    # parts alternate text, digits, text, ... so every position has one type
    key = tuple(int(x) if i % 2 else x for i, x in enumerate(parts))
    return key, s  # the original string breaks ties ("img01" vs "img1") deterministically


def natural_sorted(items):
    """Sort names the way people count: ``img2`` before ``img10``.

    Case is ignored and runs of digits are compared as integers.

    Parameters
    ----------
    items : iterable of str or os.PathLike
        Names or paths (compared as their full text).

    Returns
    -------
    list
        The items, in natural order. Items equal under that order (``img01`` and ``img1``)
        are ordered by their plain text.
    """
    return sorted(items, key=_natural_key)


def _is_image_file(p):
    return p.suffix.lower() in IMAGE_EXTENSIONS and p.is_file()


def list_images(pattern_or_folder):
    """List the image files of a sequence in natural order.

    Parameters
    ----------
    pattern_or_folder : str or os.PathLike
        A folder (every file in it, not its sub-folders, whose name ends in one of
        ``IMAGE_EXTENSIONS``, any case) or a glob pattern such as ``"run3/img_*.tif"``
        (``**`` matches sub-folders); matches that are not image files are left out.

    Returns
    -------
    list of pathlib.Path
        Natural-sorted (:func:`natural_sorted`) paths.

    Raises
    ------
    FileNotFoundError
        Nothing matched: the message names the pattern and how to fix it.
    """
    text = os.fspath(pattern_or_folder)
    p = Path(text)
    if p.is_dir():
        found = [q for q in p.iterdir() if _is_image_file(q)]
        if not found:
            raise FileNotFoundError(
                f"pattern_or_folder: folder '{p}' holds no image files "
                f"({', '.join(IMAGE_EXTENSIONS)}); check the folder or give a glob pattern"
            )
    else:
        found = [Path(q) for q in glob.glob(text, recursive=True)]
        found = [q for q in found if _is_image_file(q)]
        if not found:
            if not glob.has_magic(text):
                hint = "no such folder or image file; check the path"
            else:
                hint = (
                    f"no image files ({', '.join(IMAGE_EXTENSIONS)}) match it; check the "
                    f"folder and the pattern, e.g. 'frames/*.tif'"
                )
                folder = p.parent
                if glob.has_magic(str(folder)) and folder.is_dir():
                    # a folder whose name holds [ ] (or * ?): the pattern reads them as wildcards
                    fixed = os.path.join(glob.escape(str(folder)), p.name)
                    hint = (f"no image files match it: the folder name '{folder}' holds "
                            f"characters a pattern reads as wildcards ([ ] * ?); escape them, "
                            f"e.g. '{fixed}', or give the folder itself")
            raise FileNotFoundError(f"pattern_or_folder: '{text}': {hint}")
    return natural_sorted(found)
