"""Random survival forest on the landmark stack, with event times coarsened to a grid.

scikit-survival's ``RandomSurvivalForest`` (Ishwaran et al. 2008, Ann Appl Stat 2:841-860) stores, in every
leaf, the cumulative hazard and survival at each distinct training time, so its memory grows with the number
of distinct times; at cohort scale with continuous times it runs out of memory. Coarsening the times to a
grid (default one month = 30.4375 days) bounds the distinct times by ``horizon / grid``.

Choices (documented because they shape the predictions):

* **Times are rounded up to the grid** (``ceil(time / grid) * grid``): an event is never moved earlier than
  observed, and a censored row stays at risk to the end of the grid interval in which it was last seen, so
  within an interval events precede censorings (the usual tie convention). Predictions at a horizon ``w``
  read the forest's survival at ``w`` itself; events in the last partial interval before ``w`` are then
  rounded past ``w`` and not counted, so choose ``w`` on the grid (2 years = 24 months exactly) to avoid a
  bias of at most one grid step.
* **Cause-specific forest**: the competing event (status 2) is treated as censoring for the outcome, so
  ``predict_risk`` is ``1 - S₁(w)``, the risk of the outcome *were the competing event removed*. It is larger
  than the cumulative incidence when competing events are frequent; use the landmark super-model for the
  cumulative incidence. The landmark ``s`` is not a split variable unless you list ``landmark`` among the
  covariates.
* Seeded: ``random_state`` fixes bootstrap samples and split candidates; ``max_samples`` subsamples rows per
  tree (an int count or a fraction), which bounds time and memory on large stacks.
* Parallel in blocks: scikit-survival's tree builder holds the interpreter lock, so threads do not speed it
  up. The trees are grown in blocks of at most 25, each a small forest with its own seed spawned from
  ``random_state`` (``numpy.random.SeedSequence``); blocks run in ``n_jobs`` worker processes and are merged
  into one forest. The block layout depends only on ``n_estimators`` and ``random_state``, so the fitted
  forest is the same for every ``n_jobs``. Block ``i`` of ``k`` is scikit-survival's forest with
  ``random_state = SeedSequence(random_state).spawn(k)[i].generate_state(1)[0]`` (:func:`tree_blocks`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from sklearn.base import BaseEstimator

from riskbench.models.risk_contract import (
    ModelInputError,
    check_covariates,
    check_horizon,
    check_stack_outcome,
    step_function_at,
)

__all__ = ["SurvivalForest", "coarsen_times", "tree_blocks"]

_TREES_PER_BLOCK = 25  # trees per independently seeded block (fixed, so results do not depend on n_jobs)


def coarsen_times(time: ArrayLike, grid_days: float | None) -> np.ndarray:
    """Round times (days) up to the next multiple of ``grid_days`` (at least one step); None keeps them.

    A tolerance of 1e-9 grid steps keeps a time already on the grid (e.g. 730.5 = 24 months) where it is.
    """
    time = np.asarray(time, dtype=float)
    if grid_days is None:
        return time.copy()
    if not np.isfinite(grid_days) or grid_days <= 0:
        raise ModelInputError(f"grid_days must be a positive number of days or None, got {grid_days!r}")
    steps = np.maximum(np.ceil(time / grid_days - 1e-9), 1.0)
    return steps * grid_days


def tree_blocks(n_estimators: int, random_state: int) -> list[tuple[int, int]]:
    """The blocks a forest of ``n_estimators`` trees is grown in: ``(number of trees, seed)`` per block.

    Blocks hold 25 trees (the last one the rest); block ``i`` of ``k`` is seeded with
    ``SeedSequence(random_state).spawn(k)[i].generate_state(1)[0]``.
    """
    if int(n_estimators) < 1:
        raise ModelInputError(f"n_estimators must be at least 1, got {n_estimators!r}")
    sizes = [_TREES_PER_BLOCK] * (int(n_estimators) // _TREES_PER_BLOCK)
    if int(n_estimators) % _TREES_PER_BLOCK:
        sizes.append(int(n_estimators) % _TREES_PER_BLOCK)
    spawned = np.random.SeedSequence(random_state).spawn(len(sizes))
    return [(size, int(child.generate_state(1)[0])) for size, child in zip(sizes, spawned)]


def _grow_block(x: np.ndarray, target: np.ndarray, n_trees: int, seed: int, params: dict):
    """One seeded block of trees (a scikit-survival forest fitted in a single thread)."""
    from sksurv.ensemble import RandomSurvivalForest

    return RandomSurvivalForest(n_estimators=n_trees, random_state=seed, n_jobs=1, **params).fit(x, target)


class SurvivalForest(BaseEstimator):
    """Cause-specific random survival forest for the outcome (status 1) on a landmark stack.

    Parameters
    ----------
    covariates : sequence of str
        Covariate columns (values known at the landmark).
    grid_days : float or None
        Width of the time grid in days (default 30.4375 = one month); None keeps continuous times.
    n_estimators : int
        Number of trees.
    max_samples : int, float or None
        Rows drawn (with replacement) per tree: a count, a fraction of the rows, or None for all rows.
    min_samples_leaf : int
        Smallest leaf; also sets ``min_samples_split = 2 * min_samples_leaf``.
    max_features : int, float or str
        Candidate covariates per split (scikit-learn convention; default "sqrt").
    max_depth : int or None
    random_state : int
        Seed for bootstrap samples and split candidates.
    n_jobs : int
        Worker processes for growing the trees (blocks of 25 trees; see module notes); -1 uses every core.

    Attributes (after fit)
    ----------------------
    forest_ : sksurv.ensemble.RandomSurvivalForest
    event_times_ : ndarray, the (coarsened) distinct event times of the forest, days from the landmark
    max_time_ : float, longest follow-up from a landmark in the training stack (days, coarsened)
    """

    def __init__(
        self,
        covariates: Sequence[str],
        *,
        grid_days: float | None = 30.4375,
        n_estimators: int = 200,
        max_samples: int | float | None = None,
        min_samples_leaf: int = 15,
        max_features: int | float | str = "sqrt",
        max_depth: int | None = None,
        random_state: int = 0,
        n_jobs: int = 1,
    ) -> None:
        self.covariates = covariates
        self.grid_days = grid_days
        self.n_estimators = n_estimators
        self.max_samples = max_samples
        self.min_samples_leaf = min_samples_leaf
        self.max_features = max_features
        self.max_depth = max_depth
        self.random_state = random_state
        self.n_jobs = n_jobs

    def fit(self, stack: pd.DataFrame) -> SurvivalForest:
        """Fit on a landmark stack (``time``, ``status`` + covariates); returns self."""
        time, status = check_stack_outcome(stack)
        x = check_covariates(stack, list(self.covariates), what="landmark stack")
        event = status == 1  # cause-specific: the competing event censors the outcome
        if not event.any():
            raise ModelInputError("the landmark stack has no outcome (status 1) rows; nothing to fit")
        coarse = coarsen_times(time, self.grid_days)
        target = np.empty(len(coarse), dtype=[("event", bool), ("time", float)])
        target["event"], target["time"] = event, coarse
        self.forest_ = self._grow(x, target)
        self.event_times_ = np.asarray(self.forest_.unique_times_, dtype=float)
        self.max_time_ = float(coarse.max())
        return self

    def _grow(self, x: np.ndarray, target: np.ndarray):
        """Grow the trees in seeded blocks (in parallel processes when n_jobs > 1) and merge them."""
        from joblib import Parallel, delayed, effective_n_jobs

        blocks_plan = tree_blocks(self.n_estimators, self.random_state)
        max_samples = self.max_samples
        if isinstance(max_samples, (int, np.integer)) and max_samples > len(x):
            max_samples = None  # fewer rows than requested: use them all
        params = dict(
            max_samples=max_samples,
            min_samples_leaf=self.min_samples_leaf,
            min_samples_split=2 * self.min_samples_leaf,
            max_features=self.max_features,
            max_depth=self.max_depth,
        )
        n_workers = max(1, min(effective_n_jobs(self.n_jobs), len(blocks_plan)))  # -1 means every core
        blocks = Parallel(n_jobs=n_workers, backend="loky" if n_workers > 1 else "sequential")(
            delayed(_grow_block)(x, target, size, seed, params) for size, seed in blocks_plan
        )
        forest = blocks[0]
        forest.estimators_ = [tree for block in blocks for tree in block.estimators_]
        forest.n_estimators = len(forest.estimators_)
        return forest

    def _check_fitted(self) -> None:
        if not hasattr(self, "forest_"):
            raise ModelInputError("this SurvivalForest is not fitted yet; call fit(stack) first")

    def predict_curve(self, stack: pd.DataFrame, times: ArrayLike) -> np.ndarray:
        """Risk ``1 - S₁(t)`` for each row and each t in ``times`` (days from the landmark).

        Returns
        -------
        ndarray, shape (n_rows, len(times)), non-decreasing along each row.
        """
        self._check_fitted()
        times = np.atleast_1d(np.asarray(times, dtype=float))
        for t in times:
            check_horizon(t, self.max_time_)
        x = check_covariates(stack, list(self.covariates), what="prediction table")
        # survival at the forest's own time points; 1 before the first event time
        survival = self.forest_.predict_survival_function(x, return_array=True)
        risk = 1.0 - survival
        return step_function_at(self.event_times_, risk, times)

    def predict_risk(self, stack: pd.DataFrame, horizon: float) -> np.ndarray:
        """Risk of the outcome in (s, s + horizon] for each row (horizon in days; see module notes)."""
        return self.predict_curve(stack, [horizon])[:, 0]
