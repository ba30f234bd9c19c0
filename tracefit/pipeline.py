"""The one analysis chain (being built): read -> detect -> predict -> identify -> results."""

from __future__ import annotations

import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.maps import read_label_image

__all__ = ["observe_image"]


def observe_image(image_path, grains_path=None, orientations=None, pixel_size_um: float | None = None,
                  min_grain_px: int = 2500):
    """Detect band families in a micrograph, per grain when a label image is given.

    Parameters
    ----------
    image_path : str or Path
        Micrograph.
    grains_path : str or Path, optional
        Grain label image of the same size (integer ids).
    orientations : dict, optional
        Grain id -> orientation (or GrainOrientation); only these grains are analysed.
    pixel_size_um : float, optional
    min_grain_px : int
        Grains with fewer pixels are skipped.

    Returns
    -------
    observed : list of tracefit.identify.matching.ObservedFamily
        With ``grain`` set (None without a label image).
    image : ndarray
    labels : ndarray or None
    notes : list of str
    """
    from tracefit.image import detect_bands, detect_grains, read_image
    from tracefit.identify import observed_from_detection
    from tracefit.image import line_continuation

    img, notes = read_image(image_path)
    if grains_path is None:
        res = detect_bands(img, pixel_size_um=pixel_size_um)
        return observed_from_detection(res), img, None, list(notes) + list(getattr(res, "notes", []))
    labels = read_label_image(grains_path)
    if labels.shape != img.shape[:2]:
        raise TracefitInputError(
            f"the grain label image is {labels.shape[1]}x{labels.shape[0]} px but the micrograph is "
            f"{img.shape[1]}x{img.shape[0]} px; they must match pixel for pixel"
        )
    present = set(int(x) for x in np.unique(labels))
    ids = None
    if orientations is not None:
        ids = [k for k in sorted(int(k) for k in orientations) if k in present]
        if not ids:
            raise TracefitInputError("no grain id of the orientation table occurs in the grain label image")
    res = detect_grains(img, labels, pixel_size_um=pixel_size_um, min_pixels=min_grain_px, grains=ids)
    obs = []
    for gid in sorted(res):
        fams = observed_from_detection(res[gid], grain=int(gid))
        for o, f in zip(fams, res[gid].families):
            o.boundary_continuation = line_continuation(img, labels, int(gid), getattr(f, "lines", []))
        obs.extend(fams)
    notes = list(notes)
    if orientations is not None:
        missing = sorted(present - set(int(k) for k in orientations))
        if missing:
            notes.append(f"{len(missing)} grain id(s) of the label image have no orientation and were skipped")
    return obs, img, labels, notes
