"""Stage 1: reading fields (the only package that opens input paths)."""

from .read import VALUE_SCALES, read_field
from .windows import RESAMPLING_RULES

__all__ = ["RESAMPLING_RULES", "VALUE_SCALES", "read_field"]
