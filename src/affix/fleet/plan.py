"""One firmware interface for every unit of a fleet, and each unit planned within it.

The interface (widths, output type and lsb, input type and box) is what
every unit's record must fit, since one firmware reads them all:

- the widths and the output type, unless the project or the pinned
  interface fixes them: the search starts at those in which the fleet's
  nominal unit (the fit of every unit's rows together) meets the budget,
  cheapest on the target first, as ``affix quantize`` chooses them for one
  model.  Where some units miss their budget there, the units that miss it
  even in the widest configuration are rejects whatever the widths; the
  cheapest configuration in which all the others pass is taken, if it lets
  more units pass.  So an outlier never widens the whole fleet's arithmetic;
- each output's lsb is the finest power of two at which every unit's
  output range over the box fits the output type and every unit's
  coefficients fit (the largest of the units' own finest lsbs), unless fixed;
- each unit then gets its own shifts, offsets and coefficients in that
  interface (:func:`affix.quantize.plan_fixed_point` with everything fixed),
  with its own overflow proof and its own budget verdict.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from affix.errors import NoConfigurationError, UsageError, parameter
from affix.fit.passes import in_workers, usable_cpus
from affix.plan import Plan
from affix.quantize import plan_fixed_point
from affix.quantize.box import resolve_per_name, resolve_ranges
from affix.quantize.design import Configuration
from affix.quantize.lsb import finest_lsb
from affix.quantize.search import configurations
from affix.targets import DEFAULT_TARGET, get_target

# Random box points each unit's integer deviation is measured on: the
# figures every unit's verdict rests on are the exact bound and the
# predicted RMS, so a few thousand points per unit suffice as a check.
UNIT_BOX_POINTS = 2_000
_UNITS_PER_WORKER = 64  # fewer units than this per process cost more to fork than they save
_LSB_TRIES = 8  # an output's lsb is doubled at most this often before a unit that does not fit is a reject


@dataclass
class FleetPlan:
    """The fleet's interface and every unit's plan in it.

    ``nominal``: the plan of the fleet's nominal unit (its widths, types,
    box and lsbs are every unit's); ``plans``: unit -> :class:`Plan`, for
    the units that fit the interface; ``unfit``: unit -> why it has no plan
    (it could not be fitted, or its coefficients do not fit the interface);
    ``margins``: unit -> per output the smaller of the budget's margin
    (budget - the integer code's worst-case deviation, or the RMS-growth
    limit - the total RMS) and the tolerance's (tolerance - the unit's
    cross-validated RMS, its RMS without cross-validation), None where an
    output has neither; a unit passes where no margin is negative.
    """

    nominal: Plan
    plans: dict[str, Plan] = field(default_factory=dict)
    unfit: dict[str, str] = field(default_factory=dict)
    margins: dict[str, list] = field(default_factory=dict)

    def passed(self, unit: str) -> bool:
        """Whether the unit has a plan and no output's margin is negative."""
        return unit in self.plans and all(m is None or m >= 0 for m in self.margins[unit])

    @property
    def failing(self) -> list[str]:
        return [unit for unit in [*self.plans, *self.unfit] if not self.passed(unit)]


def plan_fleet(fleet, input_ranges, *, budget=None, budget_rms=None, tolerance=None, output_lsb=None,
               coef_bits=None, acc_bits=None, output_ctype=None, input_lsb=None, rounding="nearest",
               target=DEFAULT_TARGET, input_ctype=None, search=True, calibration=None, progress=None) -> FleetPlan:
    """Plan every unit of ``fleet`` (:class:`affix.fleet.fit.FleetFit`) in one interface.

    The arguments mean what they mean for :func:`affix.quantize.plan_fixed_point`; a budget
    (``budget`` or ``budget_rms``) is required, as it is each unit's pass/fail criterion on the
    integer code.  ``tolerance`` (one value, or {output: value}) is the largest cross-validated RMS
    error a unit's own fit may have: a unit beyond it is out of tolerance whatever the code does.
    ``calibration`` (rows of the inputs) is measured on the nominal plan only.  ``progress``,
    if given, is called with the number of units planned so far in the current configuration.
    """
    if budget is None and budget_rms is None:
        raise UsageError(f"a fleet needs an accuracy budget, each unit's pass/fail criterion: give "
                         f"{parameter('budget')} or {parameter('budget_rms')}", parameter="budget")
    box = resolve_ranges(fleet.inputs, input_ranges)
    limits = resolve_per_name(fleet.outputs, tolerance, "tolerance", kind="tolerance")
    core = get_target(target)
    common = dict(input_lsb=input_lsb, budget=budget, budget_rms=budget_rms, rounding=rounding, target=core.name,
                  input_ctype=input_ctype, search=search, default_budget=False, best_effort=True)
    fleet_scale = _Scale(fleet, box, resolve_per_name(fleet.outputs, output_lsb, "output_lsb", kind="lsb"), input_lsb)
    nominal = plan_fixed_point(fleet.pooled, box, coef_bits=coef_bits, acc_bits=acc_bits, output_ctype=output_ctype,
                               output_lsb=fleet_scale.fixed_by_name, box_points=UNIT_BOX_POINTS, **common)
    common["input_ctype"] = nominal.input_ctype
    configs = configurations(coef_bits, acc_bits, output_ctype, target=core, n_inputs=len(box),
                             n_outputs=len(fleet.outputs))
    configs = configs[[c.widths for c in configs].index((nominal.coef_bits, nominal.acc_bits,
                                                         Configuration(1, 1, nominal.output_ctype).widths[2])):]
    everyone = list(fleet.models)
    plans, unfit, lsb = _in_config(fleet, configs[0], everyone, fleet_scale, common, progress)
    failing = [unit for unit, plan in plans.items() if not plan.budget["met"]]
    if failing and len(configs) > 1:
        # Units that miss their budget even in the widest configuration are rejects whatever the widths:
        # the search looks for the cheapest configuration in which all the others pass.
        widest = max(configs, key=lambda c: c.widths)
        best, _, _ = _in_config(fleet, widest, failing, fleet_scale, common, None)
        fixable = [unit for unit in failing if unit in best and best[unit].budget["met"]]
        for config in configs[1:] if fixable else ():
            trial, _, _ = _in_config(fleet, config, fixable, fleet_scale, common, None)
            if all(unit in trial and trial[unit].budget["met"] for unit in fixable):
                wider = _in_config(fleet, config, everyone, fleet_scale, common, progress)
                if sum(p.budget["met"] for p in wider[0].values()) > sum(p.budget["met"] for p in plans.values()):
                    plans, unfit, lsb = wider
                break
    widths = _widths(next(iter(plans.values()), nominal))
    # The nominal unit at the fleet's scale, measured in full: what plan.json and the report show.
    nominal = plan_fixed_point(fleet.pooled, box, **widths, output_lsb=_by_name(fleet.outputs, lsb),
                               calibration=calibration, **common)
    unfit = {**fleet.rejected, **unfit}
    return FleetPlan(nominal, {u: plans[u] for u in fleet.units if u in plans},
                     {u: unfit[u] for u in fleet.units if u in unfit},
                     {u: _margins(plans[u], fleet.models[u], limits) for u in fleet.units if u in plans})


def _margins(plan, model, tolerance) -> list:
    """Per output the smaller of the budget's and the tolerance's margins (see FleetPlan)."""
    error = model.cv_rms if model.cv_rms is not None else model.rms
    margins = []
    for budget_margin, limit, figure in zip(plan.budget["margins"], tolerance, error):
        both = [m for m in (budget_margin, None if limit is None else limit - float(figure)) if m is not None]
        margins.append(min(both) if both else None)
    return margins


class _Scale:
    """Each output's lsb in a configuration: the one given, else the largest of every unit's (and the
    nominal unit's) finest lsb there (:func:`affix.quantize.lsb.finest_lsb`)."""

    def __init__(self, fleet, box, fixed, input_lsb):
        self.fleet, self.box, self.fixed = fleet, box, fixed
        self.fixed_by_name = _by_name(fleet.outputs, fixed)
        steps = resolve_per_name(fleet.inputs, input_lsb, "input_lsb", kind="input lsb")
        self.per_count = np.array([1.0 if q is None else q for q in steps])

    def lsb(self, config) -> list[float]:
        models = [self.fleet.pooled, *self.fleet.models.values()]
        return [fixed if fixed is not None else max(
            finest_lsb(model.gain[i] * self.per_count, float(model.offset[i]), config, self.box) for model in models)
            for i, fixed in enumerate(self.fixed)]


def _in_config(fleet, config, units, scale, common, progress):
    """(plans, unfit, lsb) of ``units`` in ``config`` at the fleet's scale there; an open lsb is
    doubled where some unit's coefficients cannot fit it."""
    lsb = scale.lsb(config)
    widths = _widths(config)
    for _ in range(_LSB_TRIES):
        models = [(unit, fleet.models[unit]) for unit in units]
        plans, unfit, coarser = _plan_units(models, scale.box, widths, lsb, scale.fixed, common, progress)
        if not coarser:
            return plans, unfit, lsb
        lsb = [step * 2 if i in coarser else step for i, step in enumerate(lsb)]
    raise NoConfigurationError(f"no lsb up to {_LSB_TRIES} doublings fits every unit in {config.describe()}", {})


def _widths(config) -> dict:
    return dict(coef_bits=config.coef_bits, acc_bits=config.acc_bits, output_ctype=config.output_ctype)


def _plan_units(models, box, widths, lsb, fixed_lsb, common, progress):
    """(plans, unfit, outputs whose open lsb some unit needs coarser) for the units' models, split
    across worker processes when there are many (each unit's plan is independent of the others)."""
    workers = min(usable_cpus(), len(models) // _UNITS_PER_WORKER)
    if workers <= 1:
        return _plan_some(models, box, widths, lsb, fixed_lsb, common, progress)
    plans, unfit, coarser = {}, {}, set()
    # Rounds of a few batches, one per worker, so progress can be shown between them.
    step = _UNITS_PER_WORKER * workers
    for start in range(0, len(models), step):
        batch = models[start : start + step]
        jobs = [(batch[k::workers], box, widths, lsb, fixed_lsb, common, None) for k in range(workers)]
        for more_plans, more_unfit, more_coarser in in_workers(_plan_some, jobs):
            plans.update(more_plans)
            unfit.update(more_unfit)
            coarser |= more_coarser
        if coarser:
            break
        if progress is not None:
            progress(start + len(batch))
    return plans, unfit, coarser


def _plan_some(models, box, widths, lsb, fixed_lsb, common, progress):
    plans, unfit = {}, {}
    names = list(models[0][1].outputs) if models else []
    for count, (unit, model) in enumerate(models, start=1):
        try:
            plans[unit] = plan_fixed_point(model, box, **widths, output_lsb=_by_name(names, lsb),
                                           box_points=UNIT_BOX_POINTS, **common)
        except NoConfigurationError as exc:
            open_outputs = {i for i, name in enumerate(names) if name in exc.per_output and fixed_lsb[i] is None}
            if open_outputs:
                return plans, unfit, open_outputs
            unfit[unit] = f"does not fit the fleet's interface: {exc.reason}"
        if progress is not None:
            progress(count)
    return plans, unfit, set()


def _by_name(names, values) -> dict | None:
    chosen = {name: value for name, value in zip(names, values) if value is not None}
    return chosen or None
