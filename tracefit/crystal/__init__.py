"""Crystals: lattices, Miller and Miller-Bravais indices, Laue-class symmetry, the slip and twin
catalogue, and orientations (Bunge, passive, sample -> crystal).

Modules: :mod:`~tracefit.crystal.lattice` (cells and their vectors),
:mod:`~tracefit.crystal.indices` (reading and writing indices),
:mod:`~tracefit.crystal.symmetry` (proper rotations and family variants),
:mod:`~tracefit.crystal.systems` (one slip or twin system, expansion, twin shear),
:mod:`~tracefit.crystal.builtin_systems` (built-in systems and the family filter),
:mod:`~tracefit.crystal.systems_file` (user systems files),
:mod:`~tracefit.crystal.rotations` (quaternion and axis-angle conversions),
:mod:`~tracefit.crystal.orientation` (the Bunge convention and :class:`Orientation`),
:mod:`~tracefit.crystal.orientation_input` (orientations from text and two directions).
"""

from tracefit.crystal import builtin_systems as _builtin_systems
from tracefit.crystal import indices as _indices
from tracefit.crystal import lattice as _lattice
from tracefit.crystal import orientation as _orientation
from tracefit.crystal import symmetry as _symmetry
from tracefit.crystal import systems as _systems
from tracefit.crystal import systems_file as _systems_file
from tracefit.crystal.builtin_systems import TRADE_NAMES, available_families, catalogue, filter_systems
from tracefit.crystal.indices import (
    BRACKETS,
    HEX_NOTATIONS,
    MillerIndex,
    check_values,
    current_index_notation,
    format_index,
    index_notation,
    parse_index,
    restate_label,
    to_three,
)
from tracefit.crystal.lattice import (
    IDEAL_C_OVER_A,
    PRESETS,
    Lattice,
    lattice_preset,
    miller_bravais_to_miller,
    miller_to_miller_bravais,
)
from tracefit.crystal.orientation import (
    Orientation,
    as_orientation_matrix,
    crystal_to_sample,
    from_axis_angle,
    from_euler,
    from_matrix,
    from_quaternion,
    from_two_directions,
    looks_like_radians,
    parse_axis_angle,
    parse_euler,
    parse_matrix,
    parse_quaternion,
    parse_vector,
    sample_to_crystal,
    to_axis_angle,
    to_euler,
    to_quaternion,
)
from tracefit.crystal.symmetry import (
    GROUP_OF_LAUE,
    canonical_sign,
    direction_variants,
    index_rotations,
    plane_variants,
    proper_rotations,
    same_family,
)
from tracefit.crystal.systems import MODES, DeformationSystem, expand_slip, expand_twin, twin_shear
from tracefit.crystal.systems_file import load_systems_file

__all__ = [
    *_lattice.__all__,
    *_indices.__all__,
    *_symmetry.__all__,
    *_systems.__all__,
    *_builtin_systems.__all__,
    *_systems_file.__all__,
    *_orientation.__all__,
]
