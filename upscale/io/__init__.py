"""Stage 1: reading fields (the only package that opens input paths)."""

from .geometry import GEOMETRY_ROLES
from .read import VALUE_SCALES, read_field
from .windows import RESAMPLING_RULES

__all__ = ["GEOMETRY_ROLES", "RESAMPLING_RULES", "VALUE_SCALES", "read_field"]
