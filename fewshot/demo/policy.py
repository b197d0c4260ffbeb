"""Policies by behaviour cloning with scikit-learn, pretraining and fine-tuning.

A policy is an ``MLPRegressor`` from what the robot sees to its two commands. Pretraining
fits it on demonstrations of many source tasks; fine-tuning continues from the pretrained
weights (a copy) with a fixed number of passes over the few target episodes of a run;
training from scratch runs the same passes from a fresh network.
"""

from __future__ import annotations

import copy
import warnings

import numpy as np
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPRegressor

from fewshot.demo.sim import Task, expert_actions, rollout, starts

__all__ = ["new_policy", "pretrain", "fine_tune", "evaluate", "demonstrations", "act"]

HIDDEN = (32, 32)


def new_policy(seed: int) -> MLPRegressor:
    """A fresh network (the from-scratch starting point)."""
    return MLPRegressor(
        hidden_layer_sizes=HIDDEN,
        activation="tanh",
        learning_rate_init=3e-3,
        batch_size=64,
        random_state=seed,
        max_iter=1,
    )


def demonstrations(
    task: Task, n: int, rng: np.random.Generator, noise: np.ndarray
) -> tuple[np.ndarray, ...]:
    """``n`` expert episodes with per-episode command noise: (returns, observations, actions, live),
    episodes × steps; ``live`` marks the steps before docking (the ones worth learning from)."""
    return rollout(
        task, lambda o: expert_actions(task, o), starts(rng, n), noise=noise, rng=rng, record=True
    )


def _fit_passes(
    model: MLPRegressor,
    obs: np.ndarray,
    act: np.ndarray,
    passes: int,
    rng: np.random.Generator,
    live: np.ndarray | None = None,
) -> None:
    keep = np.ones(obs.shape[:2], dtype=bool) if live is None else live
    x = obs[keep]
    y = act[keep]
    model.batch_size = min(64, len(x))  # a run of one short episode has fewer samples than a batch
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        for _ in range(passes):
            order = rng.permutation(len(x))
            model.partial_fit(x[order], y[order])


def pretrain(
    obs: np.ndarray, act: np.ndarray, live: np.ndarray, *, passes: int, seed: int
) -> MLPRegressor:
    """Fit a policy on source demonstrations (episodes × steps × dims, live steps only)."""
    model = new_policy(seed)
    _fit_passes(model, obs, act, passes, np.random.default_rng(seed), live)
    return model


def fine_tune(
    start: MLPRegressor | None,
    obs: np.ndarray,
    act: np.ndarray,
    live: np.ndarray,
    *,
    passes: int,
    seed: int,
) -> MLPRegressor:
    """Continue training a copy of ``start`` (or a fresh network) on the run's episodes."""
    model = new_policy(seed) if start is None else copy.deepcopy(start)
    if len(obs):
        _fit_passes(model, obs, act, passes, np.random.default_rng(seed), live)
    return model


def act(model: MLPRegressor | None):  # type: ignore[no-untyped-def]
    """The policy function of a model; an untrained network outputs zero commands."""
    if model is None or not hasattr(model, "coefs_"):
        return lambda obs: np.zeros((len(obs), 2))
    return lambda obs: model.predict(obs).reshape(len(obs), 2)


def evaluate(task: Task, model: MLPRegressor | None, eval_starts: np.ndarray) -> np.ndarray:
    """Per-episode returns of the policy from fixed evaluation starts (no command noise)."""
    return rollout(task, act(model), eval_starts)
