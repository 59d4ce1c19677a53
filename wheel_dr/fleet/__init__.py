"""Fleet analysis: every robot's bags on a Dask cluster, geometry trends per robot and wear alerts."""
from __future__ import annotations
