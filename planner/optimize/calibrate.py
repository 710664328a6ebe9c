"""Calibrating the chance constraint: the in-sample allowance that keeps the promise out of sample.

A plan fitted to ``P`` demand paths under "at most ``⌊α · P⌋`` paths dry per cycle" is
optimistic: its loads are cut to the paths it was given, so on fresh paths its cycles run dry
more often than ``α`` (the optimism of a sample-average chance constraint). Luedtke & Ahmed
(2008), *A sample approximation approach for optimization with probabilistic constraints*
(SIAM J. Optim. 19(2), 674–699), show that solving the sample problem at a smaller risk level
than the target, and checking the solution on an independent sample with a binomial bound,
gives plans that meet the true target with a chosen confidence.

Method here (validate, tighten, re-solve), per terminal:

1. Solve at the in-sample allowance (first the target's own ``⌊α · P⌋``).
2. Price the plan on validation paths drawn with an independent seed (stream 2 of
   :func:`planner.evaluate.simulate.fresh_seed`; the out-of-sample check uses stream 1, so its
   paths stay untouched).
3. A terminal fails when its worst cycle's dry count ``k`` of ``n`` validation paths is
   significant against the target: ``P(X ≥ k | X ~ Binomial(n, α)) < 1 − CONFIDENCE``
   (one-sided binomial test, :func:`scipy.stats.binom.sf`).
4. Failing terminals get a smaller allowance, ``min(a − 1, ⌊a · α / k̂⌋)`` with
   ``k̂ = k / n``, never below half the target's own allowance (``FLOOR_SHARE``: a terminal
   whose risk sits in a cycle no load can shorten gains nothing from more, and an allowance
   of 0 asks for the worst of all paths), and the network is solved again; at most
   ``ROUNDS`` rounds.

Terminals whose target cannot be reached at all (their notes say why) are left as they are,
and so are the terminals of a depot whose crews could not serve the tighter targets (the
round is solved again with their previous allowance).
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from scipy import stats

from planner.costs import cycle_dry_counts, simulate
from planner.optimize.problem import PlanningProblem, PlanResult, target_dry_paths

CONFIDENCE = 0.75      # a terminal fails when its excess over the target is this sure
ROUNDS = 5             # re-solves at most
FLOOR_SHARE = 0.5      # the in-sample allowance stays at least this share of the target's


@dataclass(frozen=True)
class Calibration:
    """The calibrated plan and how it was reached.

    ``problem``: the problem with the final in-sample allowance per terminal
    (``dry_allowance``); ``result``: its plan; ``first``: the plan at the target's own
    allowance; ``rounds``: re-solves done; ``tightened``: terminals whose allowance was
    lowered; ``validation_paths``; ``log``: one line per round.
    """

    problem: PlanningProblem
    result: PlanResult
    first: PlanResult
    rounds: int
    tightened: int
    validation_paths: int
    log: tuple[str, ...]

    def summary(self) -> dict:
        """Figures for ``summary.json``."""
        allowance = np.asarray(self.problem.dry_allowance, dtype=float)
        paths = self.problem.shape[1]
        before, after = float(self.first.objective), float(self.result.objective)
        return {
            "method": "validate, tighten, re-solve (Luedtke & Ahmed 2008)",
            "confidence": CONFIDENCE,
            "validation_paths": int(self.validation_paths),
            "rounds": int(self.rounds),
            "terminals_tightened": int(self.tightened),
            "in_sample_level_median": round(float(np.median(allowance)) / paths, 5)
            if allowance.size else None,
            "in_sample_level_min": round(float(allowance.min()) / paths, 5)
            if allowance.size else None,
            "expected_cost_before": round(before, 2),
            "expected_cost_after": round(after, 2),
            "cost_increase": round((after - before) / before, 6) if before else 0.0,
        }


def failing_terminals(problem: PlanningProblem, result: PlanResult,
                      validation: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(failing [T] bool, worst [T])``: the one-sided binomial test of each terminal's worst
    cycle on the validation paths ``validation`` ``[T, n, D]`` (module text, step 3), and that
    cycle's share of dry paths."""
    ledger = simulate(result.visits, result.loads, problem.start_balance, validation,
                      problem.limit, problem.visit_fee, problem.rates, problem.mode)
    counts = cycle_dry_counts(ledger, result.visits).max(axis=1, initial=0)
    n = validation.shape[1]
    alpha = float(problem.max_dry_probability)
    p_value = stats.binom.sf(counts - 1, n, alpha)
    return p_value < 1.0 - CONFIDENCE, counts / n


def _crowded(result: PlanResult) -> np.ndarray:
    """``[T]`` bool: terminals whose depot's crews could not serve every target (their notes
    say so, :func:`planner.optimize.solve_plan`)."""
    return np.array(["cannot serve every target" in note for note in result.notes])


def calibrate(problem: PlanningProblem, validation: np.ndarray,
              solve: Callable[[PlanningProblem], PlanResult], *,
              rounds: int = ROUNDS) -> Calibration:
    """Solve ``problem`` with ``solve`` and tighten the in-sample allowance of the terminals
    that fail on ``validation`` paths (module text). Deterministic for given inputs."""
    t_count = problem.shape[0]
    allowance = (np.full(t_count, target_dry_paths(problem), dtype=np.int64)
                 if problem.dry_allowance is None
                 else np.asarray(problem.dry_allowance, dtype=np.int64).copy())
    current = replace(problem, dry_allowance=allowance.copy())
    result = first = solve(current)
    alpha = float(problem.max_dry_probability)
    floor = np.floor(FLOOR_SHARE * allowance).astype(np.int64)
    log, tightened, done = [], np.zeros(t_count, bool), 0
    frozen = np.zeros(t_count, bool)
    for r in range(rounds):
        fail, worst = failing_terminals(current, result, validation)
        fail &= result.reachable
        fail &= (allowance > floor) & ~frozen
        log.append(f"calibration round {r}: {int(fail.sum())} terminal(s) above the target "
                   f"on {validation.shape[1]} validation paths")
        if not fail.any():
            break
        previous = allowance.copy()
        scaled = np.floor(allowance * alpha / np.maximum(worst, 1e-12)).astype(np.int64)
        allowance = np.where(fail, np.maximum(np.minimum(allowance - 1, scaled), floor),
                             allowance)
        trial = replace(problem, dry_allowance=allowance.copy())
        attempt = solve(trial)
        done += 1
        # tighten only while the crews allow: a depot whose crews can no longer serve every
        # target keeps its previous allowance (and is not tightened again)
        crowded = _crowded(attempt) & ~_crowded(result)
        if crowded.any():
            back = np.isin(problem.depot_of, np.unique(problem.depot_of[crowded])) & fail
            allowance = np.where(back, previous, allowance)
            frozen |= back
            fail &= ~back
            log.append(f"calibration round {r}: the crews of "
                       f"{len(np.unique(problem.depot_of[crowded]))} depot(s) cannot serve the "
                       f"tighter targets; their {int(back.sum())} terminal(s) keep the "
                       "previous allowance")
            trial = replace(problem, dry_allowance=allowance.copy())
            attempt = solve(trial)
        tightened |= fail
        current, result = trial, attempt
    return Calibration(problem=current, result=result, first=first, rounds=done,
                       tightened=int(tightened.sum()), validation_paths=validation.shape[1],
                       log=tuple(log))
