"""The report's section on calibrated cameras: calibration quality, and for two cameras the
out-of-plane motion and the shape (from the results file's ``/stereo`` or ``/lens`` group)."""

from __future__ import annotations

import io

import numpy as np

from dic.report._document import FigureBlock, Paragraph, Table

__all__ = ["camera_blocks", "CAMERA_TITLE"]

CAMERA_TITLE = "Cameras and calibration"
_DPI = 110


def _figure(fig, caption, alt):
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI)
    data = buf.getvalue()
    # the PNG header holds the pixel size (IHDR: width, height as big-endian uint32)
    w, h = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")
    return FigureBlock(png=data, width=w, height=h, caption=caption, alt=alt)


def camera_blocks(res, image=None) -> list:
    """Blocks of the cameras section for an open results file; empty without a calibration.

    Parameters
    ----------
    res : dic.sequence.Results
    image : ndarray, optional
        The left reference image, drawn under the maps.
    """
    from dic.sequence.stereofile import read_stored
    from dic.stereo.calfile import calibration_from_text

    group = "stereo" if read_stored(res.path, "stereo") is not None else "lens"
    attrs = read_stored(res.path, group)
    if attrs is None or not attrs.get("calibration"):
        return []
    cal = calibration_from_text(str(attrs["calibration"]), "stored in the results file")
    blocks = []
    if cal.stereo:
        blocks.append(Paragraph(
            "Two cameras. Positions X, Y, Z and displacements U, V, W are in mm in the left "
            "camera's frame (origin at its optical centre, X along image columns, Y along "
            "rows, Z along its optical axis); the strain is surface strain in the tangent "
            "plane of the reference surface."))
    else:
        blocks.append(Paragraph(
            "One camera with a calibration: displacements were corrected for lens distortion "
            "before the stored strain was computed."))
    facts = [("reprojection error, overall", f"{cal.rms:.3f} px RMS")]
    for which, fit in zip(("left camera", "right camera") if cal.stereo else ("camera",),
                          cal.cameras):
        k, d = fit.matrix, fit.distortion
        facts.append((which, f"focal {k[0, 0]:.1f} x {k[1, 1]:.1f} px, centre "
                             f"({k[0, 2]:.1f}, {k[1, 2]:.1f}) px, k1 {d[0]:.4g}, k2 {d[1]:.4g}, "
                             f"{fit.rms:.3f} px RMS"))
    if cal.stereo:
        facts.append(("baseline", f"{cal.baseline:.2f} mm"))
        facts.append(("angle between the cameras", f"{cal.angle_deg:.2f} degrees"))
    if cal.target:
        t = cal.target
        facts.append(("target", f"{t.get('kind')}, {t['inner_corners'][0]} x "
                                f"{t['inner_corners'][1]} inner corners, "
                                f"{t['square_mm']:g} mm squares"))
    blocks.append(Table(rows=[list(r) for r in facts], caption="Calibration"))
    why = {r.index: r.reason for r in cal.rejected}
    rows = [[name, f"{cal.view_rms[i]:.3f}" if i in cal.view_rms else "-",
             "left out: " + why[i] if i in why else "used"]
            for i, name in enumerate(cal.names)]
    if rows:
        blocks.append(Table(rows=rows, header=("target photograph", "reprojection RMS (px)",
                                               "use"),
                            caption="Reprojection error per target photograph"))
    if cal.stereo and len(res):
        from dic.figures.common import find_image
        from dic.figures.surface import surface_map
        from dic.sequence.stereofile import load_stereo

        st = load_stereo(res.path)
        image = find_image(res, None) if image is None else image
        last = st.X.shape[0] - 1
        ok = st.reason[last] == 0
        if ok.any():
            blocks.append(Paragraph(
                f"Last frame: {int(ok.sum())} of {ok.size} points in 3-D; W from "
                f"{np.nanmin(st.W[last]):.3f} to {np.nanmax(st.W[last]):.3f} mm; largest gap "
                f"between the two rays {np.nanmax(st.gap[last]):.4f} mm."))
        for quantity, caption in (("W", f"Out-of-plane displacement W, frame {last} (mm)."),
                                  ("shape", "Shape: distance of the reference surface from its "
                                            "best-fit plane (mm).")):
            fig, _ = surface_map(res.path, -1, quantity, image=image)
            blocks.append(_figure(fig, caption, caption))
    return blocks
