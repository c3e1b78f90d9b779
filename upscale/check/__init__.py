"""Stage 5: the check that the coarse model passes the same flow as the fine one.

`axis` solves the same pressure drop across each axis of the fine and the
coarse model; `subdomains` does so on windows of whole blocks when the fine
grid is beyond the check limit; `limits` says how large a check may be and
refuses, before any work, one that would not fit.
"""

from .axis import AxisCheck, check_flow, check_summary, coarse_check, fine_solves
from .limits import DEFAULT_LIMIT

__all__ = ["DEFAULT_LIMIT", "AxisCheck", "check_flow", "check_summary", "coarse_check", "fine_solves"]
