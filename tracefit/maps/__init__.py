"""Grain maps: orientation tables (our plain CSV), grain label images, and orientation maps.

- :mod:`~tracefit.maps.tables` -- the per-grain orientation CSV and label images
- :mod:`~tracefit.maps.orientation_map` -- EBSD maps (.ang, .ctf, orix HDF5) read through orix
- :mod:`~tracefit.maps.segment` -- grains from neighbour misorientation, mean orientations
- :mod:`~tracefit.maps.register` -- control points, map -> micrograph transforms, warped grain ids
- :mod:`~tracefit.maps.grain_map` -- the whole chain: :func:`grain_map_from_orientation_map`
- :mod:`~tracefit.maps.synthetic` -- synthetic maps of known grains
"""


from tracefit.maps.tables import (
    GrainOrientation,
    read_orientation_table,
    write_orientation_table,
    read_label_image,
)
from tracefit.maps.orientation_map import OrientationMap, lattice_for_laue, read_orientation_map
from tracefit.maps.segment import (
    DEFAULT_MIN_GRAIN_POINTS,
    GrainSegmentation,
    mean_orientations,
    neighbour_misorientation_deg,
    segment_grains,
    symmetry_quaternions,
)
from tracefit.maps.register import (
    CONTROL_POINT_COLUMNS,
    REGISTRATIONS,
    Registration,
    fit_registration,
    read_control_points,
    scaled_registration,
    warp_labels,
)
from tracefit.maps.grain_map import DEFAULT_MIN_GRAIN_PX, GrainMap, grain_map_from_orientation_map
from tracefit.maps.synthetic import grain_quaternions, synthetic_crystal_map, voronoi_labels

__all__ = [
    "GrainOrientation",
    "read_orientation_table",
    "write_orientation_table",
    "read_label_image",
    "OrientationMap",
    "read_orientation_map",
    "lattice_for_laue",
    "GrainSegmentation",
    "segment_grains",
    "neighbour_misorientation_deg",
    "mean_orientations",
    "symmetry_quaternions",
    "DEFAULT_MIN_GRAIN_POINTS",
    "Registration",
    "read_control_points",
    "fit_registration",
    "scaled_registration",
    "warp_labels",
    "CONTROL_POINT_COLUMNS",
    "REGISTRATIONS",
    "GrainMap",
    "grain_map_from_orientation_map",
    "DEFAULT_MIN_GRAIN_PX",
    "voronoi_labels",
    "grain_quaternions",
    "synthetic_crystal_map",
]
