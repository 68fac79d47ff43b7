"""The string choices of the spec and the statistics, as ``Literal`` types.

Each list of allowed words is written once, here; the spec parser reads the allowed values
with :func:`typing.get_args` and the statistics annotate their arguments with the same types.
A light module (no third-party import), so that reading a spec stays quick.
"""

from __future__ import annotations

from typing import Literal

#: Contiguity of the spatial weights.
ContiguityKind = Literal["queen", "rook"]
#: What happens to areas without a contiguity neighbour.
IslandPolicy = Literal["exclude", "knn"]
#: Which rate each group's rate is divided by: the reference group's, or the highest.
Comparison = Literal["reference", "highest"]
#: Multiple-testing policies of the local Moran p-values.
FdrMethod = Literal["bh", "none"]
#: Where covered fractions are computed: in this process, or on dask.
Engine = Literal["local", "dask"]
