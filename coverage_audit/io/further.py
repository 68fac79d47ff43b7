"""The inputs of the later stages, read in the input stage with the areas.

:func:`read_further_inputs` builds the spec's other footprints and reads the
``[activity]`` table, the ``[lending]`` records (streamed into counts), the variance
replicate table of the population counts and the ``[access]`` sites and cost table, so
that no stage after the input stage reads a file. Each reader returns what it left out in an :class:`~coverage_audit.inputs.Exclusions`
of its own and its files' input records; the audit gathers them.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..footprint import Footprint, build_footprint
from ..inputs import AreaInputs, Exclusions, InputRecord
from ..spec import AuditSpec
from .activity import read_activity
from .costs import AccessInputs, read_access_inputs
from .hmda_counts import LendingRecords, read_lending_records
from .joins import MatchReport
from .replicates import read_replicates


@dataclass(frozen=True, eq=False)
class Replicates:
    """Variance replicates of the counts, per area.

    Attributes
    ----------
    ids : tuple of str
        The area ids, in the order of the columns.
    counts : mapping
        Key (group name, or ``population``) -> replicate counts, 80 x areas.
    exclusions : Exclusions
        Rows of the table whose area is not analysed.
    """

    ids: tuple[str, ...]
    counts: Mapping[str, np.ndarray]
    exclusions: Exclusions = field(default_factory=Exclusions)

    def aligned(self, ids: list[str]) -> dict[str, np.ndarray]:
        """Return the counts with their columns in the order of ``ids``."""
        if list(self.ids) == list(ids):
            return dict(self.counts)
        position = {a: k for k, a in enumerate(self.ids)}
        take = np.array([position[a] for a in ids], dtype=int)
        return {key: values[:, take] for key, values in self.counts.items()}


@dataclass(frozen=True)
class FurtherInputs:
    """What the later stages read, read in the input stage with the areas.

    Attributes
    ----------
    footprints : tuple of Footprint
        Every footprint of the spec after the first, built over the analysed areas.
    activity : tuple or None
        The ``[activity]`` table, its input record and its match to the areas.
    exclusions : Exclusions
        Rows of the other footprints left out (the audit adds them to its exclusions).
    records : tuple of InputRecord
        The other footprints' and the activity table's files, for the manifest.
    lending : LendingRecords or None
        The ``[lending]`` records as counts, with their own records and exclusions.
    replicates : Replicates or None
        The population's variance replicates, with their own exclusions.
    access : AccessInputs or None
        The ``[access]`` sites with their capacities and the matched cost table, with
        their own records and exclusions.
    """

    footprints: tuple[Footprint, ...] = ()
    activity: tuple[pd.DataFrame, InputRecord, MatchReport] | None = None
    exclusions: Exclusions = field(default_factory=Exclusions)
    records: tuple[InputRecord, ...] = ()
    lending: LendingRecords | None = None
    replicates: Replicates | None = None
    access: AccessInputs | None = None


def read_further_inputs(
    spec: AuditSpec, inputs: AreaInputs, footprint: Footprint | None = None
) -> FurtherInputs:
    """Build the other footprints; read the activity, lending, replicate and cost tables.

    ``footprint`` is the audited (first) footprint, whose points ``[access]`` measures.
    """
    exclusions = Exclusions()
    built = tuple(
        build_footprint(
            fp_spec,
            inputs,
            exclusions,
            circle_vertices=spec.analysis.circle_vertices,
            id_width=spec.areas.id_width,
        )
        for fp_spec in spec.footprints[1:]
    )
    records = [r for f in built for r in f.records]
    area_ids = inputs.frame[inputs.id_column].astype(str).tolist()
    activity = None
    if spec.activity is not None:
        activity = read_activity(spec, inputs.frame[inputs.id_column].tolist())
        records.append(activity[1])
    lending = None
    if spec.lending is not None:
        has_minority = "minority_share" in inputs.frame.columns
        lending = read_lending_records(spec.lending, area_ids, has_minority)
    return FurtherInputs(
        built,
        activity,
        exclusions,
        tuple(records),
        lending,
        _replicates(spec, inputs, area_ids),
        None if footprint is None else read_access_inputs(spec, inputs, footprint),
    )


def _replicates(spec: AuditSpec, inputs: AreaInputs, area_ids: list[str]) -> Replicates | None:
    pop = spec.population
    if pop.replicates is None:
        return None
    left_out = Exclusions()
    counts = read_replicates(
        pop.replicates,
        {"population": pop.total, **dict(pop.groups)},
        area_ids,
        id_width=spec.areas.id_width,
        exclusions=left_out,
    )
    return Replicates(tuple(area_ids), counts, left_out)
