"""An invented control problem: a wheeled robot that must dock at a charging bay.

The robot has a position and a heading; each step it is given a forward command and a
turn command in [-1, 1]. How far a command takes it depends on the task: the motor
gain, the steering gain (and its sign: some source tasks steer mirrored), and a drift
such as a sloped floor. The robot sees the bay in its own frame and does not know the
task's gains, so a policy must learn them from episodes of that task. Everything is
vectorised over episodes so that rollouts of many episodes cost one numpy loop.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "Task",
    "STEPS",
    "DOCK_RADIUS",
    "observe",
    "step",
    "rollout",
    "expert_actions",
    "random_actions",
]

STEPS = 60
DT = 0.25
DOCK_RADIUS = 0.15
DOCK_BONUS = 10.0
STEP_COST = 0.05


@dataclass(frozen=True)
class Task:
    """One docking task's dynamics.

    Attributes
    ----------
    name : str
    dock : tuple of float
        Where the bay is.
    motor, steer : float
        How much one unit of forward / turn command moves and turns the robot.
    mirrored : bool
        Steering acts the other way round (a different domain of tasks).
    drift : tuple of float
        A constant push per second (e.g. a sloped floor).
    facing : float
        The direction the bay's mouth faces (radians): the robot must drive in from that side.
    """

    name: str
    dock: tuple[float, float]
    motor: float = 1.0
    steer: float = 1.0
    mirrored: bool = False
    drift: tuple[float, float] = (0.0, 0.0)
    facing: float = 0.0


DISTRACTORS = (
    8  # sensor readings that carry nothing about docking (wheel temperatures, battery, ...)
)
OBS_DIM = 7 + DISTRACTORS
ENTRY = np.cos(
    np.radians(35)
)  # docking counts only when the robot drives in within 35 degrees of straight


def observe(task: Task, state: np.ndarray, rng: np.random.Generator | None = None) -> np.ndarray:
    """What the robot sees (episodes × 15): the bay in its own frame, the distance, the heading error,
    the direction the bay faces in its own frame, and eight readings unrelated to docking (noise),
    which a policy trained on little data may mistake for signal."""
    dx = task.dock[0] - state[:, 0]
    dy = task.dock[1] - state[:, 1]
    c, s = np.cos(state[:, 2]), np.sin(state[:, 2])
    fx, fy = c * dx + s * dy, -s * dx + c * dy
    dist = np.hypot(dx, dy)
    err = np.arctan2(fy, fx)
    rel = task.facing - state[:, 2]
    useful = np.stack([fx, fy, dist, np.sin(err), np.cos(err), np.sin(rel), np.cos(rel)], axis=1)
    gen = rng if rng is not None else np.random.default_rng(len(state))
    return np.concatenate([useful, gen.normal(size=(len(state), DISTRACTORS))], axis=1)


def step(task: Task, state: np.ndarray, action: np.ndarray) -> np.ndarray:
    """Apply clipped commands (episodes × 2) for one time step."""
    a = np.clip(action, -1.0, 1.0)
    turn = (-1.0 if task.mirrored else 1.0) * task.steer * a[:, 1]
    heading = state[:, 2] + turn * DT
    speed = task.motor * a[:, 0]
    x = state[:, 0] + (speed * np.cos(heading) + task.drift[0]) * DT
    y = state[:, 1] + (speed * np.sin(heading) + task.drift[1]) * DT
    return np.stack([x, y, heading], axis=1)


def starts(rng: np.random.Generator, n: int) -> np.ndarray:
    """Random start states: anywhere within 2.5 of the origin, any heading."""
    r = 2.5 * np.sqrt(rng.random(n))
    phi = rng.uniform(0, 2 * np.pi, n)
    return np.stack([r * np.cos(phi), r * np.sin(phi), rng.uniform(-np.pi, np.pi, n)], axis=1)


def expert_actions(task: Task, obs: np.ndarray) -> np.ndarray:
    """A scripted controller that knows the task's gains: it steers for a lead point in front of the
    bay's mouth, which slides onto the bay as the robot closes in, so it enters head-on."""
    fx, fy, dist = obs[:, 0], obs[:, 1], obs[:, 2]
    mouth = np.stack(
        [obs[:, 6], obs[:, 5]], axis=1
    )  # the facing direction in the robot frame (cos, sin)
    lead = np.minimum(0.8, 0.6 * dist)[:, None]
    aim = np.stack([fx, fy], axis=1) + lead * mouth
    err = np.arctan2(aim[:, 1], aim[:, 0])
    sign = -1.0 if task.mirrored else 1.0
    turn = np.clip(sign * 1.8 * err / task.steer, -1, 1)
    reach = np.hypot(aim[:, 0], aim[:, 1])
    drive = np.clip((0.3 + 1.2 * reach) * np.maximum(np.cos(err), 0.0) / task.motor, -1, 1)
    return np.stack([drive, turn], axis=1)


def random_actions(rng: np.random.Generator, n: int) -> np.ndarray:
    """Uniform random commands: the floor reference."""
    return rng.uniform(-1, 1, size=(n, 2))


def rollout(
    task: Task,
    policy,
    start: np.ndarray,
    *,
    noise: np.ndarray | None = None,  # type: ignore[no-untyped-def]
    rng: np.random.Generator | None = None,
    record: bool = False,
):
    """Run ``policy(obs) -> actions`` from each start; returns per-episode returns (and, with
    ``record``, the observations and the actions taken, episodes × steps × dims).

    Reward: a small cost per step until the robot docks, and a bonus for docking, which ends
    the episode. With ``record`` it also returns which steps were still live (before docking). A policy that never docks scores -1.5, an expert about +9. ``noise`` (per episode) perturbs the commands, for demonstrations of
    varying quality.
    """
    n = len(start)
    state = start.copy()
    active = np.ones(n, dtype=bool)
    total = np.zeros(n)
    obs_log = np.zeros((n, STEPS, OBS_DIM))
    live = np.zeros((n, STEPS), dtype=bool)
    sensor_rng = rng if rng is not None else np.random.default_rng(12345)
    act_log = np.zeros((n, STEPS, 2))
    for t in range(STEPS):
        obs = observe(task, state, sensor_rng)
        act = np.asarray(policy(obs), dtype=float)
        if noise is not None and rng is not None:
            act = act + rng.normal(size=act.shape) * noise[:, None]
        if record:
            obs_log[:, t] = obs
            act_log[:, t] = np.clip(act, -1, 1)
            live[:, t] = active
        state = np.where(active[:, None], step(task, state, act), state)
        dist = np.hypot(task.dock[0] - state[:, 0], task.dock[1] - state[:, 1])
        total += np.where(active, -STEP_COST, 0.0)
        head_on = np.cos(state[:, 2] - (task.facing + np.pi)) > ENTRY
        docked = active & (dist < DOCK_RADIUS) & head_on
        total += np.where(docked, DOCK_BONUS, 0.0)
        active &= ~docked
    if record:
        return total, obs_log, act_log, live
    return total
