"""Stage 2: partition of the fine grid into coarse blocks."""

from .blocks import REMAINDER_POLICIES, ZERO_RULES, BlockSpec

__all__ = ["REMAINDER_POLICIES", "ZERO_RULES", "BlockSpec"]
