"""What the science of one survey image produces: the chain's result as the survey's plain records.

The survey runs the one chain (:func:`tracefit.pipeline.analyse_image`); this module translates a
job's image into its arguments and its :class:`~tracefit.pipeline.ImageResult` into records.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.results import jsonable
from tracefit.survey.jobs import ImageJob

if TYPE_CHECKING:  # for the hints only
    from tracefit.results import ImageResult

__all__ = ["ImageAnalysis", "chain_inputs", "analyse_image", "analysis_from_result"]


# --------------------------------------------------------------------------- analysis of one image
@dataclass
class ImageAnalysis:
    """What the science of one image produced, before figures and files.

    Attributes
    ----------
    image : ndarray (H, W)
        The micrograph as read (float gray), for the overlay.
    families : list of dict
        Detected families in detection order, each with ``angle_deg``, ``angle_sigma_deg``,
        ``n_bands``, ``spacing_px``, ``spacing_um``, ``strength``, ``grain`` and ``lines``
        (pixel endpoints ``[col0, row0, col1, row1]``).
    identifications : list of dict
        ``FamilyIdentification.to_dict()`` per family, same order as ``families``.
    grains : list of dict
        One per orientation: ``grain`` (id or None), ``euler_deg``, ``predicted`` (list of
        ``PredictedTrace.to_dict()`` with ``normal_image``: the normal in the image frame).
    warnings : list of str
    labels : ndarray or None
        Grain label image, for drawing grain boundaries.
    notes : list of str
        What reading and detection did on the way (bit depth, data bar excluded, ...).
    extra : dict
        Map-level checks (``frame_check``, ``artefacts``), JSON-ready.

    Examples
    --------
    :func:`analyse_image` makes one for an image of a job, here the bundled demo's first:

    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> a = analyse_image(load_job(demo_job_path()).images[0])
    >>> a.image.shape, len(a.families), len(a.identifications)
    ((384, 512), 2, 2)
    """

    image: np.ndarray
    families: list
    identifications: list
    grains: list
    warnings: list = field(default_factory=list)
    labels: np.ndarray | None = None
    notes: list = field(default_factory=list)
    extra: dict = field(default_factory=dict)
    grain_map: Any = None  # the registered orientation map, for its check figure


def _predicted_dicts(lattice, g, systems, frame, load) -> list[dict]:
    """Predicted traces of every candidate plane, with the plane normal in the image frame."""
    from tracefit.conventions import data_to_image_matrix
    from tracefit.predict import predict_traces

    M = data_to_image_matrix(frame)
    out = []
    for t in predict_traces(lattice, g, systems, frame, load):
        d = t.to_dict() if hasattr(t, "to_dict") else dict(t)
        n = np.asarray(d.get("normal_sample"), float).reshape(-1)[:3]
        d["normal_image"] = (M @ n).tolist()
        out.append(jsonable(d))
    return out


def _job_load(im: ImageJob, lattice):
    """The image's load as a :class:`tracefit.predict.Load` (axis or stress), in the frame the job names."""
    from tracefit.predict import load_from_fields

    return load_from_fields(im.load, im.load_sense, im.load_frame, im.load_stress, lattice)


def chain_inputs(im: ImageJob) -> dict[str, Any]:
    """The arguments of :func:`tracefit.analyse_image` that a job's image stands for.

    The survey runs the same chain as ``tracefit identify`` and the library; this is the only
    translation from job-file fields to its arguments.

    Parameters
    ----------
    im : ImageJob
        One image of a job.

    Returns
    -------
    dict
        Keyword arguments of :func:`tracefit.analyse_image` (``lattice`` included; the image
        itself is ``im.file``).

    Examples
    --------
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> kw = chain_inputs(load_job(demo_job_path()).images[0])
    >>> kw["lattice"].name, kw["modes"], kw["pixel_size_um"]
    ('fcc', ('slip',), 0.5)
    """
    from tracefit.conventions import FrameSettings
    from tracefit.crystal import from_euler, lattice_preset

    lattice = lattice_preset(im.lattice, im.c_over_a)
    kw = dict(lattice=lattice, modes=tuple(im.modes), families=tuple(im.families) if im.families else None,
              frame=FrameSettings(**im.frame), load=_job_load(im, lattice),
              pixel_size_um=im.pixel_size_um, mask=im.mask, detect=dict(im.detect), path=str(im.file), **dict(im.match))
    if im.euler_deg is not None:
        kw["orientation"] = from_euler(np.asarray(im.euler_deg, float))
    elif im.orientation_map is not None:
        kw.update(orientation_map=im.orientation_map, control_points=im.control_points,
                  map_settings=dict(im.map_settings))
    else:
        kw.update(labels=im.labels, orientations=im.orientations)
    return kw


def analyse_image(im: ImageJob) -> ImageAnalysis:
    """Detect the band families of one job image and identify their planes.

    Runs :func:`tracefit.pipeline.analyse_image` (the one chain) with the image's settings and
    turns its result into the survey's plain records.

    Parameters
    ----------
    im : ImageJob
        One image of a job, with its settings resolved.

    Returns
    -------
    ImageAnalysis
        The families (angles in degrees, spacings in px and um), their identifications and
        each grain's predicted traces.

    Raises
    ------
    TracefitInputError
        For a missing or unreadable file, or inconsistent settings.

    Examples
    --------
    The bundled demo's first coupon (fcc, two slip-line families):

    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> a = analyse_image(load_job(demo_job_path()).images[0])
    >>> sorted((round(f["angle_deg"], 1), i["candidates"][0]["plane"]) for f, i in zip(a.families, a.identifications))
    [(21.4, [1, 1, 1]), (144.6, [1, 1, -1])]
    """
    from tracefit.pipeline import analyse_image as run_chain

    if not im.file.is_file():
        raise TracefitInputError(f"image file {str(im.file)!r} not found")
    kw = chain_inputs(im)
    image, move = im.file, None
    if im.series and im.series.get("frame", 1) > 1:  # a later frame of an in-situ series
        image, move = _onto_first_frame(im, kw)
    res = run_chain(image, kw.pop("lattice"), **kw)
    a = analysis_from_result(res)
    if im.series:
        a.extra["series_frame"] = jsonable({**im.series, "registration": move})
    return a


def _onto_first_frame(im: ImageJob, kw: dict):
    """A later frame of a series on the first frame's pixels, where its grain map belongs.

    Frames of the first frame's size are used as they are unless the series asks for
    registration; then the frame (and its mask) is moved onto the first frame by phase
    correlation (:func:`tracefit.image.frames.register_frame`) and the pixels it does not cover
    are masked out.
    """
    from tracefit.image import read_image
    from tracefit.image.frames import register_frame, warp_frame

    img, _ = read_image(im.file)
    ref_path = im.series.get("reference")
    ref, _ = read_image(ref_path)
    if not im.series.get("register"):
        if img.shape != ref.shape:
            raise TracefitInputError(f"frame {im.name!r} is {img.shape[1]} x {img.shape[0]} px but the series' first "
                                     f"frame is {ref.shape[1]} x {ref.shape[0]} px; set register = true for the series")
        return im.file, None
    try:
        move = register_frame(ref, img)
    except TracefitInputError as exc:
        raise TracefitInputError(f"frame {im.name!r} of series {im.series.get('name')!r}: {exc}") from None
    warped = warp_frame(img, move)
    valid = np.isfinite(warped)
    if kw.get("mask") is not None:
        m, _ = read_image(kw["mask"])
        valid &= np.nan_to_num(warp_frame(m, move, order=0, fill=0.0)) > 0
    kw["mask"] = valid
    warped[~valid] = float(np.nanmedian(warped)) if valid.any() else 0.0
    return warped.astype(np.float32), move.to_dict()


def analysis_from_result(res: ImageResult) -> ImageAnalysis:
    """The survey's plain view of a :class:`tracefit.pipeline.ImageResult`.

    Parameters
    ----------
    res : ImageResult
        What :func:`tracefit.analyse_image` returned.

    Returns
    -------
    ImageAnalysis
        Its families, identifications and grains as plain records.

    Examples
    --------
    >>> import tracefit as tf
    >>> res = tf.analyse_image(None, "fcc", orientation=tf.Orientation.from_euler([10, 20, 30]), modes=["slip"],
    ...                        measured=[tf.ObservedFamily(73.2, 0.3)])
    >>> a = analysis_from_result(res)
    >>> a.families[0]["angle_deg"], a.identifications[0]["candidates"][0]["plane"]
    (73.2, [1, -1, 1])
    """
    recs = res.family_records()
    families = [{k: v for k, v in r.items() if k not in ("identification", "index")} for r in recs]
    idents = [r["identification"] for r in recs]
    status = {g.grain: g for g in res.grains}
    grains = []
    for gid, g in res.orientations.items():
        gs = status.get(gid)
        if gs is not None and gs.status == "no orientation":
            continue
        grains.append(jsonable({
            "grain": gid,
            "euler_deg": None if gs is None else gs.euler_deg,
            "n_pixels": None if gs is None or gid is None else gs.n_pixels,
            "status": None if gs is None else gs.status,
            "reason": None if gs is None else gs.reason,
            "predicted": _predicted_dicts(res.lattice, g, res.systems, res.frame, res.load),
        }))
    for gs in res.grains:  # grains the chain could not analyse keep a line in the record
        if gs.grain not in res.orientations:
            grains.append(jsonable({**gs.to_dict(), "predicted": []}))
    warns = list(res.warnings)
    extra = {"frame_check": res.identification.frame_check, "artefacts": res.identification.artefacts}
    return ImageAnalysis(image=res.image, families=families, identifications=idents, grains=grains,
                         warnings=warns, labels=res.labels, notes=list(res.notes), extra=jsonable(extra),
                         grain_map=res.grain_map)
