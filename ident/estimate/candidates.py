"""Candidate models of an identification: ARX structures and subspace models, fitted and scored.

The search of :func:`ident.estimate.identify.identify` first gathers many cheap
estimates and scores each on held-out data; the best of them start the
prediction-error refinement. This module holds the candidate record and the
two generators:

- **ARX**: an ``(na, nb, nk)`` grid ranked by AIC, BIC and FPE from one R
  factor, the best few by each criterion fitted in full
  (:func:`ident.estimate.arx.grid_search_arx`). An ARX candidate also gives
  a refinement start: its pure input delay ``nk - 1`` becomes an input shift
  and the rest an observer-form state-space model with its ARX predictor.
- **Subspace**: for every input shift, every horizon and every weighting
  (N4SID, MOESP, CVA), one pass over the estimation data
  (:func:`ident.estimate.subspace.project_weightings`) and a model of every
  order; ``B``, ``D`` and the initial states come from the screening data.

Long logs are screened on a bounded part (:class:`Screen`): the projections and
the ARX grid read every estimation sample, but the ``B, D`` fits, the
refinements and the held-out scores use at most ``screen_samples`` estimation
and validation samples, evenly spread stretches of the record. The final
model is polished and scored on all the data.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..errors import IdentificationError, OptionError
from ..lti.input_delay import with_input_delays
from ..lti.models import StateSpaceModel
from .data import Experiment, shift_inputs, working_stretches
from .order import Criteria
from .preprocess import PreparedData
from .scoring import HeldOutScore, held_out_score, score_window, warmups_for

__all__ = ["STAGES", "Candidate", "Fitted", "Screen", "arx_candidates", "subspace_candidates",
           "polynomial_candidates"]

#: ``"estimated"``: a direct estimate (ARX least squares, subspace);
#: ``"refined"``: the result of a prediction-error refinement.
STAGES = ("estimated", "refined")


@dataclass(frozen=True, slots=True, eq=False)
class Candidate:
    """One candidate model and its scores.

    Attributes
    ----------
    method : str
        Family of the estimate (``"arx"``, ``"subspace"``, or a polynomial structure).
    stage : {"estimated", "refined"}
        A direct estimate, or its prediction-error refinement.
    order : int
        ``max(na, nb)`` for ARX, states of the delay-free model otherwise.
    structure : dict
        ``{"na", "nb", "nk"}`` for ARX; ``{"n", "weighting", "horizon"}`` for
        subspace; a refined candidate adds ``"refined_from"`` (index of its start).
    input_delay : tuple of int
        Pure delay per input (samples) put in front of the model as states.
    n_states : int
        States of the whole model (delay states included).
    n_parameters : int
        Estimated parameters (all outputs, initial states not counted); for
        state-space models the local coordinates ``n (m + p)`` plus the
        estimated feedthrough and noise-gain entries.
    validation_fit : numpy.ndarray, shape (p,)
        Fit percent per output on the held-out (screening) data, the initial
        state fitted to a leading window that is not scored; ``-inf`` if it diverged.
    mean_fit : float
        Mean of ``validation_fit``.
    criteria : Criteria or None
        AIC, BIC and FPE of ARX candidates (on the grid's rows).
    noise_model : str or None
        ``"output_error"`` or ``"innovations"`` for refined candidates.
    selected : bool
        True for the chosen candidate.
    """

    method: str
    stage: str
    order: int
    structure: dict[str, Any]
    input_delay: tuple[int, ...]
    n_states: int
    n_parameters: int
    validation_fit: np.ndarray
    mean_fit: float
    criteria: Criteria | None = None
    noise_model: str | None = None
    selected: bool = False

    def as_dict(self) -> dict[str, Any]:
        """Return a JSON-friendly dict of the candidate."""
        return {
            "method": self.method,
            "stage": self.stage,
            "order": self.order,
            "structure": self.structure,
            "input_delay": list(self.input_delay),
            "n_states": self.n_states,
            "n_parameters": self.n_parameters,
            "validation_fit": [float(v) for v in self.validation_fit],
            "mean_fit": float(self.mean_fit),
            "criteria": None if self.criteria is None else self.criteria.as_dict(),
            "noise_model": self.noise_model,
            "selected": self.selected,
        }


@dataclass(eq=False)
class Fitted:
    """A candidate with what the search needs to go on from it (internal to the search).

    ``core`` is the delay-free model on inputs shifted by ``shift``;
    ``feedthrough`` says per input whether ``D`` is estimated (it always is: a
    shift of ``s`` with a direct term covers the delays ``s`` and ``s + 1``,
    and the refined fit decides); ``result``
    the estimator's own result; ``caught`` the warnings recorded while fitting.
    """

    candidate: Candidate
    core: StateSpaceModel
    shift: tuple[int, ...]
    feedthrough: tuple[bool, ...]
    result: Any
    caught: list = field(default_factory=list)
    score: HeldOutScore | None = None
    estimation_loss: float = float("nan")
    estimation_errors: tuple[np.ndarray, ...] = ()

    @property
    def model(self) -> StateSpaceModel:
        """The whole model: ``core`` behind its input delays."""
        return with_input_delays(self.core, self.shift)


class Screen:
    """The data candidates are fitted and scored on, with shifted copies made once.

    Parameters
    ----------
    prep : PreparedData
    screen_samples : int
        Largest number of estimation samples for ``B, D`` fits and refinements,
        and of validation samples for scores.
    max_states : int
        Largest model state count expected (sets the initial-state window).
    direct_in_sample : bool
        Score direct estimates (stage ``"estimated"``) on the estimation data
        too (default). ``False`` when only refined candidates are selected
        from: the in-sample errors serve the selection only.
    """

    def __init__(self, prep: PreparedData, screen_samples: int, max_states: int, *,
                 direct_in_sample: bool = True) -> None:
        self.prep = prep
        self.direct_in_sample = direct_in_sample
        self.estimation = working_stretches(prep.estimation, screen_samples)
        self.validation, warmups = _screen_validation(prep, screen_samples)
        self.window = score_window(self.validation, max_states)
        self.warmups = warmups
        y = np.vstack([e.y[0 if w is not None else self.window:] for e, w in zip(self.validation, warmups,
                                                                                   strict=True)])
        self.output_variance = np.var(y, axis=0)
        self._shifted: dict[tuple, tuple[Experiment, ...]] = {}

    def estimation_for(self, shift: tuple[int, ...], *, full: bool = False) -> tuple[Experiment, ...]:
        """Screening (or, with ``full``, all) estimation data with the inputs shifted."""
        key = (tuple(shift), full)
        if key not in self._shifted:
            data = self.prep.estimation if full else self.estimation
            self._shifted[key] = shift_inputs(data, shift)
        return self._shifted[key]

    def score(self, fitted: Fitted, *, as_model: StateSpaceModel | None = None, simulator=None) -> None:
        """Score a candidate on the screening validation data and on its estimation data (see ``direct_in_sample``).

        ``as_model`` (with its own ``simulator``) replaces ``fitted.model`` for the
        held-out score: another realisation of the same model (an ARX model in
        its own coordinates, simulated by its difference equations).
        """
        model = fitted.model if as_model is None else as_model
        fitted.score = held_out_score(model, self.validation, self.window, simulator, self.warmups)
        if not self.direct_in_sample and fitted.candidate.stage == "estimated":
            return
        est = held_out_score(fitted.core, self.estimation_for(fitted.shift), min(self.window, 50))
        fitted.estimation_errors = est.errors
        if est.errors:
            mse = sum(np.einsum("ij,ij->j", e, e) for e in est.errors) / sum(len(e) for e in est.errors)
            fitted.estimation_loss = self.normalised_loss(mse)

    def normalised_loss(self, error_variance: np.ndarray) -> float:
        """Mean over the outputs of an error variance divided by the output's variance (screening estimation data)."""
        var = np.var(np.vstack([e.y for e in self.estimation]), axis=0)
        return float(np.mean(np.asarray(error_variance) / np.where(var > 0, var, 1.0)))


def _screen_validation(prep: PreparedData, limit: int) -> tuple[tuple[Experiment, ...], list]:
    """Held-out records to score on, and the warm-up (end of the estimation part before) of each.

    When the held-out data fit in ``limit`` samples they are scored whole, each
    continued from at most ``limit / 2`` estimation samples before it; otherwise
    evenly spread stretches are scored after an initial-state window.
    """
    total = sum(e.n_samples for e in prep.validation)
    if total <= limit:
        warm = warmups_for(prep.validation, prep.estimation, prep.validation_ranges, prep.estimation_ranges,
                           max(limit // 2, 1))
        return tuple(prep.validation), warm
    stretches = working_stretches(prep.validation, limit)
    return stretches, [None] * len(stretches)


def _mean(fit: np.ndarray) -> float:
    return float(np.mean(fit)) if np.all(np.isfinite(fit)) else -np.inf


def state_space_parameters(n: int, m: int, p: int, feedthrough: Sequence[bool], noise_gain: bool) -> int:
    """Local coordinates of an ``n``-state model: ``n (m + p)``, plus estimated ``D`` and ``K`` entries."""
    return n * (m + p) + p * int(sum(bool(f) for f in feedthrough)) + (n * p if noise_gain else 0)


# --------------------------------------------------------------------------- ARX


def arx_candidates(prep: PreparedData, screen: Screen, orders: Sequence[int], delays: Sequence[tuple[int, ...]],
                   *, per_criterion: int, fixed_order: int | None) -> tuple[list[Fitted], Any]:
    """Fit and score ARX candidates: the fixed structure, or a grid's shortlist.

    Parameters
    ----------
    prep : PreparedData
    screen : Screen
    orders : sequence of int
        ``na`` and ``nb`` values of the grid.
    delays : sequence of tuple of int
        Delay vectors ``nk`` to try (one entry per input each).
    per_criterion : int
        Structures each criterion puts on the shortlist.
    fixed_order : int or None
        ``na = nb = fixed_order`` with the first delay vector only.

    Returns
    -------
    (list of Fitted, ArxSweep or None)
    """
    from .arx import ArxOptions, grid_search_arx, iter_arx_candidates

    names = {"input_names": prep.input_names, "output_names": prep.output_names}
    sweep = None
    if fixed_order is not None:
        structures = [ArxOptions(na=fixed_order, nb=fixed_order, nk=tuple(delays[0]))]
        steps = ((None, r) for r in iter_arx_candidates(prep.estimation, prep.sample_time, structures, **names))
    else:
        sweep, _, steps = grid_search_arx(prep.estimation, prep.sample_time, na_values=orders, nb_values=orders,
                                          nk_values=list(delays), per_criterion=per_criterion, **names)
    out = []
    while True:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                k_grid, res = next(steps)
            except StopIteration:
                break
        if isinstance(res, Exception):
            if fixed_order is not None:
                raise res
            continue
        out.append(_arx_fitted(res, k_grid, sweep, screen, list(caught)))
    if not out:
        raise IdentificationError("no ARX candidate could be fitted", hint="fix a low --order or check the inputs")
    return out, sweep


def _arx_fitted(res, k_grid, sweep, screen: Screen, caught: list) -> Fitted:
    """Wrap an ARX result as a candidate: scored by its difference equations; start = shifted observer form."""
    from .arx import arx_state_space

    nk = tuple(int(v) for v in res.nk)
    shift = tuple(max(v - 1, 0) for v in nk)
    core = arx_state_space(res.a, res.b, [v - s for v, s in zip(nk, shift, strict=True)],
                           res.model.sample_time, input_names=res.model.inputs, output_names=res.model.outputs)
    crit = res.criteria
    if sweep is not None:
        row = sweep.rows[k_grid]
        crit = Criteria(aic=row.aic, bic=row.bic, fpe=row.fpe)
    p = core.n_outputs
    cand = Candidate(
        method="arx", stage="estimated", order=max(int(res.na), *(int(v) for v in res.nb)),
        structure={"na": int(res.na), "nb": [int(v) for v in res.nb], "nk": list(nk)},
        input_delay=shift, n_states=res.model.n_states, n_parameters=int(res.n_parameters),
        validation_fit=np.zeros(p), mean_fit=0.0, criteria=crit,
    )
    fitted = Fitted(cand, core, shift, (True,) * len(nk), res, caught)
    screen.score(fitted, as_model=res.model, simulator=res.simulate)
    fitted.candidate = _with_score(cand, fitted.score)
    return fitted


def _with_score(cand: Candidate, score: HeldOutScore) -> Candidate:
    return replace(cand, validation_fit=score.fit, mean_fit=_mean(score.fit))


# --------------------------------------------------------------------------- subspace


def subspace_candidates(prep: PreparedData, screen: Screen, orders: Sequence[int], shifts: Sequence[tuple[int, ...]],
                        *, horizons: Sequence[int | None], weightings: Sequence[str], stabilize: bool,
                        feedthrough: Sequence[bool]) -> tuple[list[Fitted], dict]:
    """Fit and score subspace models of every order, for every shift, horizon and weighting.

    Returns
    -------
    (list of Fitted, dict)
        The candidates, and evidence of the first projection (``singular_values``,
        ``suggested_order``, ``factorization``).
    """
    out: list[Fitted] = []
    evidence: dict = {}
    for shift in shifts:
        for h in dict.fromkeys(horizons):
            found, first = subspace_group(prep, screen, orders, shift, h, weightings=weightings, stabilize=stabilize,
                                          feedthrough=feedthrough)
            out += found
            evidence = evidence or first
    return out, evidence


def subspace_group(prep: PreparedData, screen: Screen, orders: Sequence[int], shift: tuple[int, ...],
                   horizon: int | None, *, weightings: Sequence[str], stabilize: bool,
                   feedthrough: Sequence[bool]) -> tuple[list[Fitted], dict]:
    """Fit and score the subspace models of every order and weighting for one input shift and horizon.

    Returns the candidates (none when the projection cannot be made) and the
    evidence of the first weighting's projection (empty then).
    """
    from .subspace import SubspaceOptions, model_of_order, project_weightings, suggest_order

    names = {"input_names": prep.input_names, "output_names": prep.output_names}
    try:
        projections = project_weightings(screen.estimation_for(shift, full=True), weightings, horizon=horizon,
                                         max_order=max(orders))
    except (OptionError, IdentificationError):
        return [], {}
    first = projections[0]
    evidence = {"singular_values": np.asarray(first.singular_values, dtype=float),
                "suggested_order": int(suggest_order(first).order),
                "factorization": {"path": first.factorization, "gram_condition": float(first.gram_condition)},
                "horizon": int(first.horizon)}
    out: list[Fitted] = []
    for proj in projections:
        for n in (n for n in orders if n <= proj.max_order):
            opts = SubspaceOptions(order=n, weighting=proj.weighting, horizon=proj.horizon,
                                   max_order=proj.max_order, stabilize=stabilize)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                res = model_of_order(proj, screen.estimation_for(shift), n, prep.sample_time, options=opts, **names)
            out.append(_subspace_fitted(res, shift, feedthrough, screen, list(caught)))
    return out, evidence


def _subspace_fitted(res, shift, feedthrough, screen: Screen, caught: list) -> Fitted:
    core = res.model
    m, p, n = core.n_inputs, core.n_outputs, core.n_states
    cand = Candidate(
        method="subspace", stage="estimated", order=n,
        structure={"n": n, "weighting": res.options.weighting, "horizon": int(res.projection.horizon)},
        input_delay=tuple(shift), n_states=n + sum(shift),
        n_parameters=state_space_parameters(n, m, p, (True,) * m, False),
        validation_fit=np.zeros(p), mean_fit=0.0,
    )
    fitted = Fitted(cand, core, tuple(shift), tuple(feedthrough), res, caught)
    screen.score(fitted)
    fitted.candidate = _with_score(cand, fitted.score)
    return fitted


# --------------------------------------------------------------------------- polynomial structures


def polynomial_candidates(prep: PreparedData, screen: Screen, orders: Sequence[int], delay: Sequence[int],
                          structure: str) -> list[Fitted]:
    """Fit and score one polynomial structure per order (every polynomial of that order, the estimated delay).

    Orders whose fit fails (too short a log for them) are left out; the
    structure's delays are its own states (no input shift).
    """
    from .polynomial import PolynomialOptions, fit_polynomial

    names = {"input_names": prep.input_names, "output_names": prep.output_names}
    m = prep.n_inputs
    nk = tuple(int(v) for v in delay)
    out: list[Fitted] = []
    for n in orders:
        opts = PolynomialOptions(structure=structure, **_polynomial_orders(structure, n, m, nk))
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                res = fit_polynomial(screen.estimation, prep.sample_time, opts, **names)
            except (IdentificationError, OptionError):
                continue
        cand = Candidate(
            method=structure, stage="estimated", order=n,
            structure={"na": res.na, "nb": list(res.nb), "nc": res.nc, "nd": res.nd, "nf": list(res.nf),
                       "nk": list(res.nk)},
            input_delay=(0,) * m, n_states=res.model.n_states, n_parameters=int(res.n_parameters),
            validation_fit=np.zeros(prep.n_outputs), mean_fit=0.0,
        )
        fitted = Fitted(cand, res.model, (0,) * m, (True,) * m, res, list(caught))
        screen.score(fitted)
        fitted.candidate = _with_score(cand, fitted.score)
        out.append(fitted)
    if not out:
        raise IdentificationError(f"no {structure} model could be fitted", hint="lower --order/--max-order")
    return out


def _polynomial_orders(structure: str, n: int, m: int, nk: tuple[int, ...]) -> dict:
    """Every polynomial of ``structure`` of order ``n`` (``nb`` per input), with delays ``nk``."""
    orders = {"nb": (n,) * m, "nk": nk}
    if structure == "armax":
        orders.update(na=n, nc=n)
    elif structure == "oe":
        orders.update(nf=(n,) * m)
    else:
        orders.update(nf=(n,) * m, nc=n, nd=n)
    return orders
