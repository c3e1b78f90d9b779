"""Stage 7: writing results (the only package that writes paths)."""

from .result import update_summary, write_result
from .staging import check_destination

__all__ = ["check_destination", "update_summary", "write_result"]
