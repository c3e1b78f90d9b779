"""Stage 1: reading fields (the only package that opens input paths)."""

from .read import VALUE_SCALES, read_field

__all__ = ["VALUE_SCALES", "read_field"]
