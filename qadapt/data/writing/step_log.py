"""A time-major record of a vector environment's steps, from which finished episodes are cut.

Holds:
    StepLog -- one row per vector step (all sub-environments at once); finished episodes of
        any set of sub-environments come out in one fancy-index per field, no per-step or
        per-environment Python loop.
"""

from __future__ import annotations

import numpy as np

_LOGGED = (
    ("observations", np.float32, "obs"),
    ("actions", np.float32, "act"),
    ("rewards", np.float32, None),
    ("next_observations", np.float32, "obs"),
    ("terminated", np.bool_, None),
    ("truncated", np.bool_, None),
    ("success", np.bool_, None),
    ("success_reported", np.bool_, None),
)


class StepLog:
    """Steps of ``count`` sub-environments, one row per vector step.

    ``start[i]`` is the row where sub-environment ``i``'s running episode began. A row in
    which a sub-environment was only being reset (NEXT_STEP autoreset: the step after a done
    step) is never part of an episode: :meth:`record` moves that environment's start past it.
    Rows older than every running episode are dropped when the log grows.

    Example:
        >>> log = StepLog(count=2, obs_dim=1, act_dim=1)
        >>> for t in range(3):
        ...     done = np.array([t == 1, t == 2])
        ...     log.record(observations=np.full((2, 1), t), actions=np.zeros((2, 1)),
        ...                rewards=np.ones(2), next_observations=np.full((2, 1), t + 1),
        ...                terminated=done, truncated=np.zeros(2, bool),
        ...                success=np.zeros(2, bool), success_reported=np.zeros(2, bool),
        ...                restarting=np.zeros(2, bool))
        ...     if t == 1:
        ...         block, lengths = log.take(np.array([0]))
        >>> lengths.tolist(), block["observations"][:, 0].tolist()
        ([2], [0.0, 1.0])
    """

    def __init__(self, count: int, obs_dim: int, act_dim: int, capacity: int = 64) -> None:
        self.count = count
        self._widths = {"obs": (obs_dim,), "act": (act_dim,), None: ()}
        self.fields = {
            name: np.empty((capacity, count, *self._widths[width]), dtype=dtype)
            for name, dtype, width in _LOGGED
        }
        self.rows = 0
        self.start = np.zeros(count, dtype=np.int64)

    def _make_room(self) -> None:
        capacity = next(iter(self.fields.values())).shape[0]
        if self.rows < capacity:
            return
        oldest = int(self.start.min(initial=self.rows))
        keep = self.rows - oldest
        if keep < capacity // 2:  # enough rows are finished with: shift the live ones down
            for array in self.fields.values():
                array[:keep] = array[oldest : self.rows].copy()
        else:  # grow, keeping the live rows
            for name, array in self.fields.items():
                grown = np.empty((2 * capacity, *array.shape[1:]), dtype=array.dtype)
                grown[:keep] = array[oldest : self.rows]
                self.fields[name] = grown
        self.start -= oldest
        self.rows = keep

    def record(self, *, restarting: np.ndarray, **step: np.ndarray) -> None:
        """Add one vector step (arrays with a leading axis of ``count``). ``restarting``
        marks sub-environments whose step only returned a reset observation."""
        self._make_room()
        row = self.rows
        for name, array in self.fields.items():
            array[row] = step[name]
        self.rows += 1
        self.start[np.asarray(restarting, dtype=bool)] = row + 1

    def take(self, envs: np.ndarray) -> tuple[dict[str, np.ndarray], np.ndarray]:
        """Cut the episodes of sub-environments ``envs`` that end at the last row, in the
        order given; return ``(per-step arrays of all of them, their lengths)``."""
        envs = np.asarray(envs, dtype=np.int64)
        last = self.rows - 1
        lengths = last - self.start[envs] + 1
        first_rows = np.repeat(np.cumsum(lengths) - lengths, lengths)
        time_index = np.repeat(self.start[envs], lengths) + (
            np.arange(int(lengths.sum()), dtype=np.int64) - first_rows
        )
        env_index = np.repeat(envs, lengths)
        block = {name: array[time_index, env_index] for name, array in self.fields.items()}
        self.start[envs] = last + 1
        return block, lengths
