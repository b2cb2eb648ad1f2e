"""What the set-up page asks for: images, pattern quality, settings advice, the analysis file.

The page sends the drawn region of interest (a rectangle or polygon, with holes), a scale line
and its length; this module turns them into a mask (:func:`dic.images.roi.make_roi`), asks
:func:`dic.metrology.pattern_quality` and :func:`dic.metrology.advise` about it, and writes an
``analysis.toml`` that ``dic run --config`` reads as it is.
"""

from __future__ import annotations

import math
import os
import threading
import tomllib
from pathlib import Path

import numpy as np

from dic import tomlfile
from dic.errors import InputError
from dic.view.pictures import grey_png

__all__ = ["SetupData", "toml_text", "ANALYSIS_NAME", "MASK_NAME"]

#: the analysis file the set-up page writes (in the images' folder unless told otherwise)
ANALYSIS_NAME = "analysis.toml"
#: mask image written when the region has holes (in a folder of its own, so that a folder or
#: pattern of images beside the analysis file never takes it for a frame)
MASK_NAME = "region_of_interest/mask.png"
_DEFAULTS = {"subset": 21, "step": 8, "window": 9, "measure": "green-lagrange"}


# --------------------------------------------------------------------------------------------
# the analysis file's text
# --------------------------------------------------------------------------------------------
def toml_text(data: dict, header: str = "") -> str:
    """A dictionary of settings as the analysis file's TOML text.

    Top-level keys, then one table per section (:func:`dic.tomlfile.toml_text`); ``frames``
    is an inline table, as the analysis file has it, and numbers must be finite.

    Parameters
    ----------
    data : dict
        Top-level values; a dict value is a ``[section]`` table, except ``frames``.
    header : str
        Comment lines put first.

    Raises
    ------
    dic.errors.InputError
        A value the analysis file cannot hold (None, NaN, infinity, other objects).
    """
    return tomlfile.toml_text(data, header, inline=("frames",), finite=True,
                              what="analysis file")


# --------------------------------------------------------------------------------------------
# the set-up data
# --------------------------------------------------------------------------------------------
class SetupData:
    """Images without results, behind the set-up page.

    Parameters
    ----------
    folder : str or os.PathLike
        A folder of images (or a glob pattern).
    out : str or os.PathLike, optional
        Where to write the analysis file (default: ``analysis.toml`` in the images' folder).
        An analysis file already there gives the settings the page starts from and keeps.
    """

    def __init__(self, folder, out=None):
        from dic.images.io import list_images

        self.images = list_images(folder)
        self.folder = self.images[0].parent
        self.out = Path(out) if out is not None else self.folder / ANALYSIS_NAME
        self.base = {}
        if self.out.is_file():
            try:
                self.base = tomllib.loads(self.out.read_text(encoding="utf-8"))
            except (tomllib.TOMLDecodeError, OSError, UnicodeDecodeError) as exc:
                raise InputError(f"'{self.out}' is not a readable analysis file ({exc}); fix "
                                 "it or choose another file with --config-out") from None
        self._lock = threading.Lock()
        self._ref = None

    def warm_up(self):
        """Read the reference image ahead of the page's first request (background thread)."""
        try:
            self.reference()
        except (ValueError, OSError):
            pass  # the page's own request reports it

    def reference(self):
        """The reference image (read once)."""
        from dic.images.io import read_image

        with self._lock:
            if self._ref is None:
                self._ref = read_image(self.images[self.reference_index()],
                                       name="reference image")
            return self._ref

    def reference_index(self) -> int:
        """Position of the reference image in the folder (the analysis file's, else 0)."""
        k = self.base.get("reference", 0)
        k = k if isinstance(k, int) and not isinstance(k, bool) else 0
        return min(max(k, 0), len(self.images) - 1)

    def info(self) -> dict:
        """Everything the set-up page needs once: images, size, the settings it starts from."""
        m, st = self.base.get("matching", {}), self.base.get("strain", {})
        roi, sc = self.base.get("roi", {}), self.base.get("scale", {})
        return {"mode": "setup", "name": self.folder.name, "frames": len(self.images),
                "image_names": [p.name for p in self.images],
                "image_shape": list(self.reference().shape),
                "out": self.out.name, "exists": self.out.is_file(),
                "subset": m.get("subset", _DEFAULTS["subset"]),
                "step": m.get("step", _DEFAULTS["step"]),
                "window": st.get("window", _DEFAULTS["window"]),
                "measure": st.get("measure", _DEFAULTS["measure"]),
                "roi": {k: v for k, v in roi.items() if k in ("rectangle", "polygon")},
                "scale": {k: v for k, v in sc.items() if k in ("mm_per_px", "line",
                                                                "length_mm")}}

    def image_png(self, k: int) -> bytes:
        """Image ``k`` of the folder as an 8-bit PNG."""
        from dic.images.io import read_image

        if not 0 <= k < len(self.images):
            raise InputError(f"frame: give an image number from 0 to {len(self.images) - 1}")
        return grey_png(self.reference() if k == self.reference_index()
                        else read_image(self.images[k]))

    # -- the region -----------------------------------------------------------------------------
    def _shape_roi(self, shape):
        """A drawn shape -> what :func:`dic.images.roi.make_roi` takes, clipped to the image."""
        rows, cols = self.reference().shape
        kind, pts = shape.get("kind"), shape.get("points") or []
        try:
            pts = [(min(max(float(x), 0.0), cols - 1.0), min(max(float(y), 0.0), rows - 1.0))
                   for x, y in pts]
        except (TypeError, ValueError):
            raise InputError("region: points must be pairs of numbers") from None
        if kind == "rectangle":
            if len(pts) != 2:
                raise InputError("region: a rectangle needs two corners")
            (xa, ya), (xb, yb) = pts
            box = [round(min(xa, xb)), round(min(ya, yb)), round(max(xa, xb)),
                   round(max(ya, yb))]
            if box[0] == box[2] or box[1] == box[3]:
                raise InputError("region: the rectangle has no area; drag over the region")
            return "rectangle", box
        if kind == "polygon":
            if len(pts) < 3:
                raise InputError("region: a polygon needs at least three corners")
            return "polygon", [[round(x, 1), round(y, 1)] for x, y in pts]
        raise InputError("region: use a rectangle or a polygon")

    def mask(self, roi: dict):
        """The region's mask: the outer shape without its holes."""
        from dic.images.roi import make_roi

        shape = self.reference().shape
        kind, val = self._shape_roi(roi.get("outer") or {})
        mask = make_roi(tuple(val) if kind == "rectangle" else val, shape)
        for h in roi.get("holes") or []:
            hk, hv = self._shape_roi(h)
            mask &= ~make_roi(tuple(hv) if hk == "rectangle" else hv, shape)
        if not mask.any():
            raise InputError("region: the holes cover the whole region; draw them smaller")
        return mask

    def check(self, roi: dict, subset=21) -> dict:
        """Pattern-quality verdict for the region (:func:`dic.metrology.pattern_quality`)."""
        from dic.metrology import pattern_quality

        mask = self.mask(roi)
        q = pattern_quality(self.reference(), subset=int(subset), roi=mask)
        d = q.as_dict()
        d["summary"] = q.summary()
        d["pixels"] = int(mask.sum())
        return d

    def advise(self, roi: dict, target_noise=200.0, scale=None) -> dict:
        """Subset, step and window for a strain-noise target (:func:`dic.metrology.advise`)."""
        from dic.metrology import advise

        a = advise(self.reference(), target_strain_noise=float(target_noise),
                   roi=self.mask(roi), pixel_size=scale, max_size=256)
        return {"met": a.met, "chosen": a.chosen, "message": a.message, "summary": a.summary()}

    # -- the analysis file ----------------------------------------------------------------------
    def settings_for(self, roi: dict, scale_line=None, length_mm=None, settings=None) -> dict:
        """The analysis file's content: the existing one's, with the drawn values put in."""
        data = {k: (dict(v) if isinstance(v, dict) else v) for k, v in self.base.items()}
        if "images" not in data:
            rel = os.path.relpath(self.folder, self.out.parent.resolve()) \
                if self.out.parent.resolve() != self.folder.resolve() else "."
            data = {"images": rel, **data}
        s = dict(_DEFAULTS, **(settings or {}))
        data.setdefault("matching", {})
        data["matching"]["subset"] = int(s["subset"])
        data["matching"]["step"] = int(s["step"])
        data.setdefault("strain", {})
        data["strain"]["window"] = int(s["window"])
        data["strain"]["measure"] = str(s["measure"])
        kind, val = self._shape_roi(roi.get("outer") or {})
        data["roi"] = ({"mask": MASK_NAME} if roi.get("holes") else {kind: val})
        if scale_line is not None:
            line = [round(float(v), 2) for v in scale_line]
            length = float(length_mm) if length_mm is not None else float("nan")
            if len(line) != 4 or not (length > 0 and math.isfinite(length)) \
                    or line[:2] == line[2:]:
                raise InputError("scale: draw a line and give its true length in mm (> 0)")
            data["scale"] = {"line": line, "length_mm": length}
        return data

    def save(self, roi: dict, scale_line=None, length_mm=None, settings=None,
             overwrite=False) -> dict:
        """Write the analysis file (and the mask image when the region has holes)."""
        from dic.files import write_text
        from dic.images.io import write_image

        if self.out.exists() and not overwrite:
            raise InputError(f"'{self.out.name}' exists; confirm to replace it")
        data = self.settings_for(roi, scale_line, length_mm, settings)
        if roi.get("holes"):
            mask = self.mask(roi)
            (self.out.parent / MASK_NAME).parent.mkdir(exist_ok=True)
            write_image(self.out.parent / MASK_NAME, mask.astype(np.uint8) * 255, bits=8)
        text = toml_text(data, header="analysis file written by the set-up page of 'dic view'"
                                      "\nrun it with: dic run --config " + self.out.name)
        write_text(self.out, text, label=None)
        self.base = tomllib.loads(text)
        return {"written": self.out.name, "text": text}
