"""trendmill: per-group ordinary least squares over Parquet, out of core, served over gRPC.

Kept free of imports so that ``import trendmill`` stays cheap; see ``trendmill.local``
for fits on this machine and ``trendmill.engine`` for the numerics.
"""

__version__ = "0.1.0"
