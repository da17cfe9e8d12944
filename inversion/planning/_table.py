"""What :func:`inversion.plan` returns: a :class:`PlanTable` of ranked :class:`PlanRow`.

A row is one set-up: the varied keys' values, its charge and expected counts, and per quantity
(every free parameter, and the derived quantities that depend on them: thickness and mixing
width in nm, fractions, totals) the expected posterior sd, the sd from counting alone and the
nuisances that limit it; with a target, the charge that reaches it.  :meth:`PlanTable.records`
flattens the rows into the columns of plan.csv.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["Quantity", "PlanRow", "PlanTable"]


@dataclass(frozen=True)
class Quantity:
    """A quantity whose expected sd a plan reports.

    Attributes
    ----------
    name : str
        ``film.areal_density``, ``film.thickness_nm``, ``fluence_scale``, ...
    unit : str
    nominal : float
        Its value at the nominal sample.
    free : bool
        True for a free parameter, False for a derived quantity (delta method).
    sample : bool
        True for a quantity of the sample (not a nuisance or background level).
    """

    name: str
    unit: str
    nominal: float
    free: bool
    sample: bool


@dataclass
class PlanRow:
    """One set-up of a plan.

    Attributes
    ----------
    rank : int
        1 for the set-up with the smallest expected sd of the ranking quantity.
    values : dict
        The varied keys and their values (run-file units).
    charge_uC : float
        The set-up's charge (from ``particles`` when the run gives ions).
    counts : float
        Expected counts in the fit window.
    sd : dict
        Quantity name -> expected posterior sd (inf: not determined by this set-up).
    sd_counting : dict
        Quantity name -> the sd if every nuisance were known exactly.
    limits : dict
        Quantity name -> tuple of :class:`~inversion.planning._expected.Limit`: the parts of
        its variance (counting statistics, each prior) by decreasing share.
    charge_for_target_uC : float or None
        The charge that brings the target quantity's sd to the target (NaN: not reachable,
        see ``target_note``); None without a target.
    target_note : str
        Why the target is out of reach, or "".
    warnings : list of str
        Where the set-up leaves the model's validity, and what the run-file reader warned.
    fisher : ndarray
        The likelihood's expected Fisher information over the free parameters (the priors'
        precision is :attr:`PlanTable.prior_precision`); joint planning adds these.
    correlation : ndarray
        Posterior correlation of the free parameters.
    run : forward.Run
        The set-up's run (checked by the run-file reader).
    theta : ndarray
        The nominal parameters at this set-up (nuisances at this set-up's run-file values).
    prior_precision : ndarray
        The priors' precision per parameter at this set-up.
    """

    rank: int
    values: dict
    charge_uC: float
    counts: float
    sd: dict
    sd_counting: dict
    limits: dict
    charge_for_target_uC: float | None = None
    target_note: str = ""
    warnings: list = field(default_factory=list)
    fisher: np.ndarray | None = field(default=None, repr=False)
    correlation: np.ndarray | None = field(default=None, repr=False)
    run: object = field(default=None, repr=False)
    theta: np.ndarray | None = field(default=None, repr=False)
    prior_precision: np.ndarray | None = field(default=None, repr=False)

    def limited_by(self, name: str, top: int = 3) -> str:
        """The largest parts of a quantity's variance as text, e.g. ``prior of
        fluence_scale 55 %; counts 30 %`` (parts under 5 % left out)."""
        return "; ".join(lim.describe() for lim in self.limits.get(name, ())[:top]
                         if lim.share >= 0.05)

    def geometry_label(self) -> str:
        """The varied values other than the exposure's (what a target's charge depends on)."""
        values = {k: v for k, v in self.values.items() if not k.startswith("exposure.")}
        return ", ".join(f"{k}={v:g}" for k, v in values.items()) or "the run file's geometry"

    def label(self) -> str:
        """``geometry.tilt_deg=30, exposure.charge_uC=8`` (or "the run file as given")."""
        if not self.values:
            return "the run file as given"
        return ", ".join(f"{k}={v:g}" for k, v in self.values.items())


@dataclass
class PlanTable:
    """The set-ups of a plan, ranked, and what they share.

    Attributes
    ----------
    rows : list of PlanRow
        Ranked: ``rows[0]`` is the best set-up.
    varied : dict
        Varied key -> its unit.
    quantities : list of Quantity
        The free parameters first (in the fit's order), then the derived quantities.
    rank_by : str
        The quantity the rows are ranked by (the target, or the first free quantity of the
        sample).
    target_sd : float or None
        The target sd of ``rank_by`` (its unit), or None.
    parameters : list of str
        The free parameters, in the order of ``fisher`` and ``correlation``.
    theta : ndarray
        Their nominal values at the best set-up.
    prior_precision : ndarray
        The priors' precision per free parameter (the Laplace curvature at the nominal) at
        the best set-up (each row has its own: a prior centred on a varied run-file value,
        such as the resolution's, moves with it).
    prior_notes : dict
        Parameter -> the prior and what it contributes, as text.
    source : str
        The run file.
    title : str
        The run file's title.
    warnings : list of str
        Warnings about the plan as a whole.
    """

    rows: list
    varied: dict
    quantities: list
    rank_by: str
    target_sd: float | None
    parameters: list
    theta: np.ndarray
    prior_precision: np.ndarray
    prior_notes: dict
    source: str = ""
    title: str = ""
    warnings: list = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.rows)

    def __iter__(self):
        return iter(self.rows)

    def __getitem__(self, index) -> PlanRow:
        return self.rows[index]

    @property
    def best(self) -> PlanRow:
        """The set-up ranked first."""
        return self.rows[0]

    def fewest_charge(self):
        """``(row, charge_uC)``: the set-up whose geometry reaches the target with the least
        charge (rows of one geometry share that charge), or None without a reachable target."""
        found = [(row.charge_for_target_uC, k) for k, row in enumerate(self.rows)
                 if row.charge_for_target_uC is not None
                 and math.isfinite(row.charge_for_target_uC)]
        if not found:
            return None
        charge, k = min(found)
        return self.rows[k], charge

    def quantity(self, name: str) -> Quantity:
        """The :class:`Quantity` called ``name``."""
        for q in self.quantities:
            if q.name == name:
                return q
        raise KeyError(name)

    def column(self, name: str) -> np.ndarray:
        """The expected sd of one quantity over the rows, in rank order."""
        return np.array([row.sd[name] for row in self.rows], dtype=float)

    def records(self) -> list[dict]:
        """One flat dict per row: the columns of plan.csv, in order.

        ``rank``, the varied keys, ``charge_uC``, ``counts_in_window``, then per quantity
        ``sd.<name>``, ``relative_sd.<name>``, ``sd_counting.<name>`` and
        ``limited_by.<name>``; with a target ``charge_for_target_uC`` and ``target_note``;
        last ``warnings`` (joined by " | ").
        """
        out = []
        for row in self.rows:
            rec = {"rank": row.rank}
            rec.update(row.values)
            rec["charge_uC"] = row.charge_uC
            rec["counts_in_window"] = row.counts
            for q in self.quantities:
                sd = row.sd[q.name]
                rec[f"sd.{q.name}"] = sd
                rec[f"relative_sd.{q.name}"] = (sd / abs(q.nominal) if q.nominal
                                                else math.nan)
                rec[f"sd_counting.{q.name}"] = row.sd_counting[q.name]
                rec[f"limited_by.{q.name}"] = row.limited_by(q.name)
            if self.target_sd is not None:
                rec["charge_for_target_uC"] = row.charge_for_target_uC
                rec["target_note"] = row.target_note
            rec["warnings"] = " | ".join(row.warnings)
            out.append(rec)
        return out
