"""Replay datasets: the on-disk format, writing, collecting, importing, splitting, sampling.

Holds (each from its own module):
    open_dataset, ReplayDataset -- read a dataset (memory-mapped, verified) [dataset]
    DatasetWriter -- stream episodes into a new dataset, atomically published [writer]
    collect, CollectionSummary -- run a policy in a gymnasium vector env into a dataset [collection]
    Policy, UniformRandomPolicy -- what collect needs from a policy; a random one [policy]
    import_arrays -- build a dataset from a user's .npz / .npy arrays [importing]
    split_dataset -- split a dataset by episode into train and held-out parts [split]
    inspect_dataset -- a report on a dataset (also ``qadapt inspect``) [inspection]
    dataset_statistics, DatasetStatistics -- counts, returns, success, action ranges [statistics]
    MixtureSampler -- batches mixed from several datasets in given shares [mixture]
    LinearShareSchedule, check_shares -- share vectors and their schedule [shares]
    ReplayBatch -- the batch handed to the learner [batch]
    write_synthetic_dataset -- invented data of a given size, for benchmarks and tests [synthetic]

The format itself is documented in docs/datasets.md.
"""

from __future__ import annotations

import importlib
from typing import Any

# Names are imported on first use, so that `qadapt inspect` or a collection job does not pay
# for importing torch, which only the sampler needs.
_HOMES = {
    "ReplayBatch": "batch",
    "CollectionSummary": "collection",
    "collect": "collection",
    "ReplayDataset": "dataset",
    "open_dataset": "dataset",
    "import_arrays": "importing",
    "inspect_dataset": "inspection",
    "MixtureSampler": "mixture",
    "Policy": "policy",
    "UniformRandomPolicy": "policy",
    "LinearShareSchedule": "shares",
    "check_shares": "shares",
    "split_dataset": "split",
    "DatasetStatistics": "statistics",
    "dataset_statistics": "statistics",
    "write_synthetic_dataset": "synthetic",
    "DatasetWriter": "writer",
}
__all__ = sorted(_HOMES)


def __getattr__(name: str) -> Any:
    home = _HOMES.get(name)
    if home is None:
        raise AttributeError(f"module 'qadapt.data' has no attribute {name!r}")
    value = getattr(importlib.import_module(f"qadapt.data.{home}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(list(globals()) + __all__)
