"""The chain's stages 2 to 4: detect -> identify -> one whole image (see :mod:`tracefit.pipeline`)."""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping, Sequence

import numpy as np

from tracefit.conventions import FrameSettings
from tracefit.errors import TracefitInputError
from tracefit.options import DEFAULT_MODES, check_options, defaults
from tracefit.pipeline.grainmap import (_as_matrix, _centroids, _traces_to_seek, orientation_table, read_grain_map,
                                        read_label_map)
from tracefit.results import FamilyDetection, GrainStatus, Identification, ImageResult

if TYPE_CHECKING:  # names for the hints only; the chain imports its stages lazily
    from tracefit.crystal import DeformationSystem, Lattice, Orientation
    from tracefit.maps import GrainOrientation
    from tracefit.matching import ObservedFamily
    from tracefit.predict import LoadAxis

__all__ = ["resolve_settings", "detect_families", "identify", "analyse_image", "observe_image"]


# --------------------------------------------------------------------------- settings
def resolve_settings(settings: dict | None = None, detect: dict | None = None) -> tuple[dict, dict]:
    """Identification/analysis settings and detection settings with defaults filled in, checked.

    Parameters
    ----------
    settings : dict, optional
        Names from the ``identify`` and ``analysis`` groups of :mod:`tracefit.options`.
    detect : dict, optional
        Names from the ``detect`` group.

    Returns
    -------
    (dict, dict)
        Complete settings (every name of the two groups) and the detection options as given
        (checked; the detector fills in its own defaults, which are the same ones).

    Raises
    ------
    tracefit.options.OptionError
        Unknown name, wrong type or value out of range.

    Examples
    --------
    >>> s, d = resolve_settings({"p_none": 0.1})
    >>> s["p_none"], s["orientation_sigma_deg"], d
    (0.1, 1.0, {})
    """
    full = {**defaults("identify"), **defaults("analysis")}
    full.update(check_options(dict(settings or {}), ("identify", "analysis")))
    return full, check_options(dict(detect or {}), "detect")


def _as_lattice(lattice):
    from tracefit.crystal import lattice_preset

    if isinstance(lattice, str):
        return lattice_preset(lattice)
    if lattice is None or not hasattr(lattice, "plane_normal"):
        raise TracefitInputError(f"lattice must be a Lattice or a preset name (fcc, bcc, hcp, tetragonal), got {lattice!r}")
    return lattice


def _as_load(load, lattice):
    """A Load from any accepted form (text and arrays are read in the image frame)."""
    from tracefit.predict import as_load

    return as_load(load, lattice)


# --------------------------------------------------------------------------- stage 2: detection
def detect_families(image: np.ndarray, *, labels: np.ndarray | None = None,
                    orientations: dict[int, GrainOrientation] | None = None, mask: np.ndarray | None = None,
                    pixel_size_um: float | None = None, min_grain_px: int | None = None, path: str | None = None,
                    predicted_traces: dict | Sequence[float] | None = None, **detect: Any) -> FamilyDetection:
    """Detect band families in a micrograph: per grain on a grain map, else in the whole image.

    Parameters
    ----------
    image : ndarray (H, W)
        Grey micrograph (float).
    labels : ndarray (H, W) of int, optional
        Grain label image; each grain is analysed on its own pixels.
    orientations : dict, optional
        Grain id -> GrainOrientation; only these grains are analysed (others get the status
        ``"no orientation"``).
    mask : ndarray (H, W) of bool, optional
        Pixels to analyse.
    pixel_size_um : float, optional
        Micrometres per pixel (band spacings in um).
    min_grain_px : int, optional
        Grains with fewer analysable pixels are skipped (default from :mod:`tracefit.options`).
    path : str, optional
        Source file name, for notes.
    predicted_traces : dict or sequence of float, optional
        Trace angles (degrees, image frame) to look along for families the open search
        misses: grain id -> angles with ``labels``, else one sequence (see
        :func:`tracefit.image.detect_bands`). Families found there have ``source="guided"``.
    **detect
        Detection settings (the ``detect`` group of :mod:`tracefit.options`).

    Returns
    -------
    FamilyDetection
        ``observed`` (one ObservedFamily per family, angles in degrees), the detector's
        ``bands``, one :class:`GrainStatus` per grain (one for the whole image without a grain
        map) and ``notes``.

    Raises
    ------
    TracefitInputError
        Bad settings, or an image the detector cannot use.

    Examples
    --------
    A synthetic 192 x 192 px micrograph with one band family at 30 deg, 16 px apart:

    >>> from tracefit.image import BandFamilySpec, render_micrograph
    >>> img, truth = render_micrograph((192, 192), [BandFamilySpec(angle_deg=30, spacing_px=16)], seed=0)
    >>> det = detect_families(img)
    >>> [round(o.angle_deg, 1) for o in det.observed], det.grains[0].status
    ([30.0], 'analysed')
    """
    from tracefit.matching import observed_from_detection
    from tracefit.image import detect_bands, detect_grains, line_continuation

    detect = check_options(detect, "detect")
    min_px = defaults("analysis")["min_grain_px"] if min_grain_px is None else check_options(
        {"min_grain_px": min_grain_px}, "analysis")["min_grain_px"]
    if labels is None:
        res = detect_bands(image, mask, pixel_size_um, path=path, predicted_traces=predicted_traces, **detect)
        obs = observed_from_detection(res)
        n_px = int(np.asarray(image).shape[0] * np.asarray(image).shape[1]) if mask is None else int(np.sum(mask))
        st = GrainStatus(None, n_px, len(obs), *_grain_verdict(res, obs, None))
        return FamilyDetection(obs, list(res.families), [st], list(res.notes))

    present = [int(x) for x in np.unique(labels) if x >= 0]  # -1: outside every grain
    ids = [g for g in present if orientations is None or g in orientations]
    centres = _centroids(labels, present)
    dets = detect_grains(image, labels, mask, pixel_size_um, path=path, min_pixels=min_px, grains=ids,
                         predicted_traces=predicted_traces, **detect)
    observed, bands, grains, notes = [], [], [], []
    for gid in ids:
        det = dets[gid]
        notes.extend(n for n in det.notes if n not in notes)  # the image's own notes come with every grain
        fams = observed_from_detection(det, grain=gid)
        for o, f in zip(fams, det.families):
            o.boundary_continuation = line_continuation(image, labels, gid, getattr(f, "lines", []))
        observed.extend(fams)
        bands.extend(det.families)
        region = labels == gid
        n_px = int(region.sum() if mask is None else (region & mask).sum())
        status, reason = _grain_verdict(det, fams, min_px)
        grains.append(GrainStatus(gid, n_px, len(fams), status, reason, x_px=centres[gid][0], y_px=centres[gid][1]))
    if orientations is not None:
        missing = [g for g in present if g not in orientations]
        for gid in missing:
            grains.append(GrainStatus(gid, int((labels == gid).sum()), 0, "no orientation",
                                      "the orientation table has no row for this grain",
                                      x_px=centres[gid][0], y_px=centres[gid][1]))
        if missing:
            notes.append(f"{len(missing)} grain id(s) of the label image have no orientation and were skipped")
    return FamilyDetection(observed, bands, grains, notes)


def _grain_verdict(det, fams, min_px) -> tuple[str, str]:
    """(status, reason) of one grain (or image) from its detection result: why it has no families."""
    if fams:
        return "analysed", ""
    verdict = getattr(det, "verdict", None)
    reason = getattr(det, "reason", "") or ""
    if verdict == "too_small" or any("too few to analyse" in n for n in det.notes):
        return "too small", reason or f"fewer than {min_px} analysable pixels"
    if verdict == "low_contrast":
        return "no families", reason or "too little contrast"
    if verdict == "not_significant":
        return "no families", reason or "nothing significant: every candidate family could arise from texture alone"
    return "no families", reason or "no band family passed the detector's tests"


# --------------------------------------------------------------------------- stage 3: identification
def _candidates(lattice, systems, modes, families):
    from tracefit.crystal import catalogue, filter_systems

    # A single string is one mode or one family (list("twin") would be four letters); other types are
    # refused by the catalogue's own checks.
    modes = [modes] if isinstance(modes, str) else modes
    families = [families] if isinstance(families, str) else families
    modes = list(modes) if isinstance(modes, (list, tuple, set, frozenset)) else modes
    families = list(families) if isinstance(families, (list, tuple, set, frozenset)) and families else (families or None)
    if systems is None:
        systems = catalogue(lattice, modes=modes, families=families)
    else:
        if isinstance(systems, (str, bytes)) or not hasattr(systems, "__iter__"):
            raise TracefitInputError(f"systems must be a list of DeformationSystem, got {type(systems).__name__}")
        systems = filter_systems(list(systems), lattice, modes=modes, families=families)
    if not systems:
        raise TracefitInputError(f"no candidate systems for this lattice with modes {', '.join(modes)}"
                                 + (f" and families {', '.join(families)}" if families else ""))
    return systems


def identify(observed: Sequence[ObservedFamily | float], lattice: Lattice | str, *,
             orientation: Orientation | np.ndarray | None = None, orientations: dict | None = None,
             systems: Sequence[DeformationSystem] | None = None, modes: Sequence[str] = DEFAULT_MODES,
             families: Sequence[str] | None = None, frame: FrameSettings | None = None,
             load: LoadAxis | str | np.ndarray | None = None, prior: dict | None = None, crss: dict | None = None, **settings: Any) -> Identification:
    """Identify the plane and system behind each observed family, with probabilities.

    Parameters
    ----------
    observed : sequence of ObservedFamily (or angles in degrees)
        Detected and/or hand-measured families; on grain maps each carries its ``grain``.
    lattice : Lattice or str
        The crystal, or a preset name (``"fcc"``, ``"bcc"``, ``"hcp"``, ``"tetragonal"``).
    orientation : Orientation or ndarray (3, 3), optional
        One orientation for every family (a single crystal or one grain).
    orientations : dict, optional
        Grain id -> GrainOrientation (or Orientation / matrix g); a grain's own ``sigma_deg``
        overrides ``orientation_sigma_deg`` for it.
    systems : list of DeformationSystem, optional
        Candidates (default: the lattice's built-in catalogue), filtered by ``modes`` and ``families``.
    modes : sequence of {"slip", "twin"}
        Which deformation modes to consider.
    families : sequence of str, optional
        Only these families, e.g. ``["{111}<1-10>"]``.
    frame : FrameSettings, optional
        How the orientation data's frame sits on the image, and stage tilt.
    load : Load, str or stress tensor, optional
        Uniaxial load axis (``"y"``, ``"[001]"``) or stress (Schmid factors, resolved shear); text
        and arrays are read in the image frame (``tracefit.Load`` states its frame).
    prior : dict, optional
        Prior weight per system family, e.g. ``{"{110}<111>": 2}`` (each family 1 by default,
        spread over its planes).
    crss : dict, optional
        Critical resolved shear stress per family, MPa; with a stress load each system says
        whether its resolved shear reaches it.
    **settings
        The ``identify`` and ``analysis`` groups of :mod:`tracefit.options`.

    Returns
    -------
    Identification
        One FamilyIdentification per observed family (same order), with candidate planes,
        predicted angles (degrees) and probabilities; on grain maps also the frame check and
        surface-artefact summary.

    Raises
    ------
    TracefitInputError
        Neither or both of ``orientation`` and ``orientations``; bad settings.

    Examples
    --------
    An fcc crystal at Bunge (10, 20, 30) deg predicts the (1-11) trace at 73.34 deg; a family
    seen at 73.2 +- 0.3 deg is that plane:

    >>> from tracefit.crystal import from_euler
    >>> from tracefit.matching import ObservedFamily
    >>> res = identify([ObservedFamily(73.2, 0.3)], "fcc", orientation=from_euler([10, 20, 30]), modes=["slip"])
    >>> best = res.families[0].best
    >>> best.plane, round(best.predicted_deg, 2), round(best.probability, 2)
    ((1, -1, 1), 73.34, 1.0)
    """
    # Over 80 lines only through its numpydoc docstring; the code is short.
    from tracefit.matching import as_observed, identify_observed

    s, _ = resolve_settings(settings)
    if (orientation is None) == (orientations is None):
        raise TracefitInputError("give one orientation (orientation=...) or a grain table (orientations=...), not "
                                 + ("both" if orientation is not None else "neither"))
    observed = as_observed(observed)  # bare angles become families; anything else is refused
    if frame is not None and not isinstance(frame, FrameSettings):
        raise TracefitInputError(f"frame must be a FrameSettings, got {type(frame).__name__}")
    lat = _as_lattice(lattice)
    cands = _candidates(lat, systems, modes, families)
    ld = _as_load(load, lat)
    match = {k: s[k] for k in ("frame_sigma_deg", "p_none", "schmid_weight", "allow_shared_planes",
                               "report_threshold", "ambiguity_ratio")}
    match.update(prior=prior, crss=crss)
    if orientation is not None:
        results = identify_observed(list(observed), lat, cands, g=_as_matrix(orientation), frame=frame, load=ld,
                                    orientation_sigma_deg=s["orientation_sigma_deg"], crack_k_sigma=s["crack_k_sigma"],
                                    **match)
        return Identification(results)
    if not isinstance(orientations, Mapping):
        raise TracefitInputError(f"orientations must map grain -> orientation, got {type(orientations).__name__}")
    ori = {k: (v.g if hasattr(v, "g") else _as_matrix(v)) for k, v in orientations.items()}
    sig = {k: v.sigma_deg for k, v in orientations.items() if getattr(v, "sigma_deg", None) is not None}
    results = identify_observed(list(observed), lat, cands, orientations=ori, frame=frame, load=ld,
                                orientation_sigma_deg=s["orientation_sigma_deg"], grain_sigma_deg=sig or None,
                                crack_k_sigma=s["crack_k_sigma"], artefacts=s["artefacts"], **match)
    out = Identification(results, artefacts=_artefact_summary(results) if s["artefacts"] else None)
    if s["frame_check"]:
        out.frame_check = _frame_check(observed, lat, ori, cands, frame, s, out.warnings)
    return out


def _artefact_summary(results) -> list:
    """Surface-artefact directions of the map: their angle and the grains of the families called artefacts."""
    by: dict = {}
    for r in results:
        a = getattr(r, "artefact_angle_deg", None)
        if r.unexplained and a is not None and getattr(r, "p_artefact", 0.0) > r.p_none:
            d = by.setdefault(round(float(a), 2), {"angle_deg": round(float(a), 2), "grains": [], "n_families": 0})
            d["grains"].append(int(r.grain) if r.grain is not None else None)
            d["n_families"] += 1
    return list(by.values())


def _frame_check(observed, lattice, ori_map, systems, frame, s, warn_out) -> dict | None:
    """On a grain map, test the frame against the traces (a wrong frame is a common source of wrong answers)."""
    from tracefit.matching import fit_frame, is_crack

    # families found along the predicted traces agree with the frame they were predicted in by construction
    use = [o for o in observed if o.grain in ori_map and not is_crack(o) and o.source != "guided"]
    if len({o.grain for o in use}) < 3 or len(use) < 4:
        return None
    fit = fit_frame(use, lattice, ori_map, systems, frame=frame, orientation_sigma_deg=s["orientation_sigma_deg"],
                    p_none=s["p_none"], n_bootstrap=50, coarse_step_deg=1.0)
    warn_out.extend(f"frame check: {w}" for w in fit.warnings)
    return fit.to_dict()


# --------------------------------------------------------------------------- stage 4: one image
def _read(image, path):
    from tracefit.image import read_image

    if isinstance(image, (str, Path)):
        if not Path(image).is_file():
            raise TracefitInputError(f"image file {str(image)!r} not found")
        img, notes = read_image(image)
        return np.asarray(img, float), list(notes), str(image)
    arr = np.asarray(image, float)
    if arr.ndim != 2:
        raise TracefitInputError(f"image must be a 2-D grey array (H, W), got shape {arr.shape}")
    return arr, [], path


def analyse_image(image: str | Path | np.ndarray | None, lattice: Lattice | str, *,
                  orientation: Orientation | np.ndarray | None = None, labels: str | Path | np.ndarray | None = None,
                  orientations: str | Path | dict | None = None, systems: Sequence[DeformationSystem] | None = None,
                  modes: Sequence[str] = DEFAULT_MODES, families: Sequence[str] | None = None,
                  frame: FrameSettings | None = None, load: LoadAxis | str | np.ndarray | None = None,
                  pixel_size_um: float | None = None, mask: str | Path | np.ndarray | None = None,
                  measured: Sequence[ObservedFamily] = (), detect: dict | None = None,
                  path: str | None = None, orientation_map: str | Path | None = None,
                  control_points: str | Path | np.ndarray | None = None, map_settings: dict | None = None,
                  prior: dict | None = None, crss: dict | None = None,
                  **settings: Any) -> ImageResult:
    """Detect the band families of one micrograph and identify their planes: the whole chain.

    Parameters
    ----------
    image : str, Path or ndarray (H, W)
        Micrograph file (PNG/TIFF/JPEG/BMP) or grey array; None with ``measured`` traces only.
    lattice : Lattice or str
        The crystal (``"fcc"``, ``tracefit.Lattice.hcp(c_over_a=1.587)``, ...).
    orientation : Orientation or ndarray (3, 3), optional
        One orientation for the whole image (single crystal).
    labels : str, Path or ndarray (H, W), optional
        Grain label image, with ``orientations``.
    orientations : str, Path or dict, optional
        Orientation table of the grains (see :func:`read_grain_map`); without ``labels`` the
        measured traces carry their grain ids.
    systems, modes, families, frame, load
        As :func:`identify`.
    pixel_size_um : float, optional
        Micrometres per pixel.
    mask : str, Path or ndarray (H, W) of bool, optional
        Pixels to analyse.
    measured : sequence of ObservedFamily
        Hand-measured traces (and cracks) to identify beside the detected ones.
    detect : dict, optional
        Detection settings (the ``detect`` group of :mod:`tracefit.options`).
    path : str, optional
        A name for an array image, used in notes and tables.
    orientation_map : str or Path, optional
        An orientation map (.ang, .ctf, orix HDF5) instead of ``labels`` and ``orientations``: its
        grains are segmented, registered onto the micrograph and used as the grain map; each
        grain's orientation spread becomes its uncertainty (never below ``orientation_sigma_deg``).
    control_points : str, Path or array_like (n, 4), optional
        Control points for ``orientation_map`` (CSV columns image_x, image_y, map_x, map_y);
        without them the map is taken to cover the image exactly, with a warning.
    map_settings : dict, optional
        ``phase``, ``threshold_deg``, ``min_grain_points``, ``registration`` of
        :func:`tracefit.maps.grain_map_from_orientation_map`.
    prior, crss : dict, optional
        As :func:`identify`.
    **settings
        The ``identify`` and ``analysis`` groups of :mod:`tracefit.options`.

    Returns
    -------
    ImageResult
        The image, grain map, detection, identification and settings used; ``families``
        lists one FamilyIdentification per observed family.

    Raises
    ------
    TracefitInputError
        Missing or unreadable files, sizes that do not match, bad settings, no orientation.

    Examples
    --------
    A synthetic micrograph of an fcc crystal at Bunge (10, 20, 30) deg with bands along the
    predicted (1-11) trace (73.34 deg):

    >>> import tracefit as tf
    >>> from tracefit.image import BandFamilySpec, render_micrograph
    >>> img, truth = render_micrograph((256, 256), [BandFamilySpec(angle_deg=73.34, spacing_px=20)], seed=1)
    >>> res = tf.analyse_image(img, "fcc", orientation=tf.Orientation.from_euler([10, 20, 30]), modes=["slip"])
    >>> fam = res.families[0]
    >>> round(fam.angle_deg, 1), fam.best.plane
    (73.3, (1, -1, 1))
    """
    # Over 80 lines because of its numpydoc docstring (every argument of the chain); the code
    # itself is short and delegates to the stages above.
    s, det = resolve_settings(settings, detect)
    if orientation_map is not None:
        if orientation is not None or labels is not None or orientations is not None:
            raise TracefitInputError("orientation_map replaces orientation, labels and orientations: give one source")
        if image is None:
            raise TracefitInputError("orientation_map is registered onto an image: give the image too")
    elif orientation is None and orientations is None:
        raise TracefitInputError("no orientation: give orientation=... (one crystal) or labels=... with "
                                 "orientations=... (a grain map)")
    if labels is not None and orientations is None:
        raise TracefitInputError("labels and orientations go together: a label image and its orientation table")
    if image is None and not measured:
        raise TracefitInputError("no image and no measured traces: give an image or measured families")
    if frame is not None and not isinstance(frame, FrameSettings):
        raise TracefitInputError(f"frame must be a FrameSettings, got {type(frame).__name__}")
    with warnings.catch_warnings(record=True) as wlist:
        warnings.simplefilter("always")
        lat = _as_lattice(lattice)
        cands = _candidates(lat, systems, modes, families)
        frame = frame or FrameSettings()
        ld = _as_load(load, lat)
        img, notes, path, lab, table = _inputs(image, path, labels, orientations)
        grain_map = None
        if orientation_map is not None:
            lab, table, grain_map = _grains_from_map(orientation_map, img.shape, control_points, map_settings,
                                                     s["orientation_sigma_deg"])
            notes += list(grain_map.notes)
        detection = None
        if img is not None:
            # per grain on a grain map, one list for a single crystal; a table without labels has no grains to search
            seek = s["guided_search"] and (lab is not None if table is not None else orientation is not None)
            traces = _traces_to_seek(lat, cands, frame, table, orientation) if seek else None
            detection = detect_families(img, labels=lab, orientations=table, mask=_read_mask(mask, img.shape),
                                        pixel_size_um=pixel_size_um, min_grain_px=s["min_grain_px"], path=path,
                                        predicted_traces=traces, **det)
            notes += detection.notes
            _fill_grain_orientations(detection.grains, table, orientation)
        observed = (detection.observed if detection is not None else []) + list(measured)
        if table is not None and any(o.grain is None for o in measured):
            raise TracefitInputError("with a grain table every measured trace needs a grain id (the CSV's grain column)")
        common = dict(systems=cands, modes=modes, families=families, frame=frame, load=ld, prior=prior, crss=crss, **s)
        if table is not None:
            ident = identify(observed, lat, orientations=table, **common)
            ori = {k: v.g for k, v in table.items()}
        else:
            ident = identify(observed, lat, orientation=orientation, **common)
            ori = {None: _as_matrix(orientation)}
    caught = list(dict.fromkeys(str(w.message) for w in wlist))
    if lab is not None and table is not None:  # only analysed grains keep their label (figures)
        lab = np.where(np.isin(lab, list(table)), lab, -1)
    settings_used = {**s, "detect": det, "modes": list(modes), "families": None if not families else list(families),
                     "pixel_size_um": pixel_size_um, "prior": prior, "crss": crss}
    return ImageResult(path=None if path is None else str(path), image=img, labels=lab, lattice=lat, frame=frame,
                       load=ld, systems=cands, orientations=ori, detection=detection, observed=observed,
                       identification=ident, settings=settings_used, notes=list(dict.fromkeys(notes)),
                       warnings=caught + ident.warnings, grain_map=grain_map)


def observe_image(image: str | Path | np.ndarray, labels: str | Path | np.ndarray | None = None,
                  orientations: str | Path | dict | None = None, pixel_size_um: float | None = None,
                  min_grain_px: int | None = None,
                  **detect: Any) -> tuple[list[ObservedFamily], np.ndarray, np.ndarray | None, list[str]]:
    """Read a micrograph (and its grain map) and detect its band families: the chain's first half.

    Parameters
    ----------
    image : str, Path or ndarray (H, W)
        Micrograph file (PNG/TIFF/JPEG/BMP) or grey array.
    labels : str, Path or ndarray (H, W), optional
        Grain label image; with ``orientations``, only grains in the table are analysed.
    orientations : str, Path or dict, optional
        Orientation table of the grains (see :func:`read_grain_map`).
    pixel_size_um : float, optional
        Micrometres per pixel (band spacings in um).
    min_grain_px : int, optional
        Grains with fewer analysable pixels are skipped (default from :mod:`tracefit.options`).
    **detect
        Detection settings (the ``detect`` group of :mod:`tracefit.options`).

    Returns
    -------
    observed : list of ObservedFamily
        One per band family (angles in degrees).
    image : ndarray (H, W)
        The micrograph as analysed (float grey).
    labels : ndarray (H, W) or None
        The grain label image as int64, when given.
    notes : list of str
        What reading and detection did on the way.

    Raises
    ------
    TracefitInputError
        A missing or unreadable file, a size mismatch or bad settings.

    Examples
    --------
    >>> from tracefit.image import BandFamilySpec, render_micrograph
    >>> img, truth = render_micrograph((192, 192), [BandFamilySpec(angle_deg=120, spacing_px=16)], seed=0)
    >>> observed, image, labels, notes = observe_image(img)
    >>> [round(o.angle_deg, 1) for o in observed], image.shape, labels
    ([120.0], (192, 192), None)
    """
    img, notes, path = _read(image, None)
    lab = table = None
    if labels is not None:
        lab, table = (read_grain_map(labels, orientations, img.shape) if orientations is not None
                      else (read_label_map(labels, img.shape), None))
    det = detect_families(img, labels=lab, orientations=table, pixel_size_um=pixel_size_um, min_grain_px=min_grain_px,
                          path=path, **detect)
    return det.observed, img, lab, notes + det.notes


def _inputs(image, path, labels, orientations):
    """Read the micrograph and the grain map: (image, notes, path, labels, table); image None allowed."""
    img = lab = table = None
    notes: list[str] = []
    if image is not None:
        img, notes, path = _read(image, path)
    if orientations is not None:
        if labels is not None:
            lab, table = read_grain_map(labels, orientations, None if img is None else img.shape)
        else:  # hand-measured traces carry their grain ids
            table = orientation_table(orientations)
    return img, notes, path, lab, table


_MAP_SETTINGS = ("phase", "threshold_deg", "min_grain_points", "registration")


def _grains_from_map(orientation_map, shape, control_points, map_settings, orientation_sigma_deg):
    """Label image and grain table of an orientation map registered onto the micrograph."""
    import dataclasses

    from tracefit.maps import grain_map_from_orientation_map

    extra = dict(map_settings or {})
    unknown = sorted(set(extra) - set(_MAP_SETTINGS))
    if unknown:
        raise TracefitInputError(f"map_settings: unknown setting {unknown[0]!r}; known: {', '.join(_MAP_SETTINGS)}")
    gm = grain_map_from_orientation_map(orientation_map, shape, control_points=control_points, **extra)
    for w in gm.warnings:
        warnings.warn(w, stacklevel=3)
    # a grain's own spread is its uncertainty, but never below what the user stated for all
    table = {k: dataclasses.replace(v, sigma_deg=max(float(v.sigma_deg or 0.0), orientation_sigma_deg))
             for k, v in gm.table.items()}
    return gm.labels, table, gm


def _read_mask(mask, shape):
    if mask is None or shape is None:
        return None
    if isinstance(mask, (str, Path)):
        from tracefit.image import read_mask

        return read_mask(mask, shape)
    m = np.asarray(mask, bool)
    if m.shape != tuple(shape[:2]):
        raise TracefitInputError(f"mask is {m.shape[1]}x{m.shape[0]} px but the image is {shape[1]}x{shape[0]} px")
    return m


def _fill_grain_orientations(grains, table, orientation) -> None:
    if table is None:
        from tracefit.crystal import to_euler

        for gs in grains:
            gs.euler_deg = [float(x) for x in to_euler(_as_matrix(orientation))]
        return
    for gs in grains:
        row = table.get(gs.grain)
        if row is not None:
            gs.euler_deg = None if row.euler_deg is None else [float(x) for x in row.euler_deg]
            gs.sigma_deg = row.sigma_deg
