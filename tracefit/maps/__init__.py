"""Grain maps: orientation tables (our plain CSV) and grain label images.
"""


from tracefit.maps.tables import (
    GrainOrientation,
    read_orientation_table,
    write_orientation_table,
    read_label_image,
)

__all__ = [
    "GrainOrientation",
    "read_orientation_table",
    "write_orientation_table",
    "read_label_image",
]
