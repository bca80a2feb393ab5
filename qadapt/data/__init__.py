"""Replay datasets, in three sub-packages: ``format`` (the on-disk format and reading it),
``writing`` (writer, collection, import, split) and ``sampling`` (the mixture sampler); the
inspection report and the statistics stay here.

Holds (each from its own module):
    open_dataset, ReplayDataset -- read a dataset (memory-mapped, verified) [format.dataset]
    DatasetWriter -- stream episodes into a new dataset, atomically published [writing.writer]
    collect, CollectionSummary -- run a policy in a gymnasium vector env into a dataset
        [writing.collection]
    Policy, UniformRandomPolicy -- what collect needs from a policy; a random one [writing.policy]
    import_arrays -- build a dataset from a user's .npz / .npy arrays [writing.importing]
    split_dataset -- split a dataset by episode into train and held-out parts [writing.split]
    inspect_dataset -- a report on a dataset (also ``qadapt inspect``) [inspection]
    dataset_statistics, DatasetStatistics -- counts, returns, success, action ranges [statistics]
    MixtureSampler -- batches mixed from several datasets in given shares [sampling.mixture]
    LinearShareSchedule, check_shares -- share vectors and their schedule [sampling.shares]
    ReplayBatch -- the batch handed to the learner [sampling.batch]
    write_synthetic_dataset -- invented data of a given size, for benchmarks and tests
        [writing.synthetic]

The format itself is documented in docs/datasets.md.
"""

from __future__ import annotations

import importlib
from typing import Any

# Names are imported on first use, so that `qadapt inspect` or a collection job does not pay
# for importing torch, which only the sampler needs.
_HOMES = {
    "ReplayBatch": "sampling.batch",
    "CollectionSummary": "writing.collection",
    "collect": "writing.collection",
    "ReplayDataset": "format.dataset",
    "open_dataset": "format.dataset",
    "import_arrays": "writing.importing",
    "inspect_dataset": "inspection",
    "MixtureSampler": "sampling.mixture",
    "Policy": "writing.policy",
    "UniformRandomPolicy": "writing.policy",
    "LinearShareSchedule": "sampling.shares",
    "check_shares": "sampling.shares",
    "split_dataset": "writing.split",
    "DatasetStatistics": "statistics",
    "dataset_statistics": "statistics",
    "write_synthetic_dataset": "writing.synthetic",
    "DatasetWriter": "writing.writer",
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
