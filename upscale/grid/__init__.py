"""Stage 2: partition of the fine grid into coarse blocks."""

from .blocks import REMAINDER_POLICIES, BlockSpec

__all__ = ["REMAINDER_POLICIES", "BlockSpec"]
