"""Replay datasets: the on-disk format, writing, collecting, importing, splitting, sampling.

Holds (each from its own module):
    open_dataset, ReplayDataset -- read a dataset (memory-mapped, verified) [dataset]
    DatasetWriter -- stream episodes into a new dataset, atomically published [writer]
    collect, CollectionSummary -- run a policy in a gymnasium vector env into a dataset [collect]
    Policy, UniformRandomPolicy -- what collect needs from a policy; a random one [policy]
    import_arrays -- build a dataset from a user's .npz / .npy arrays [importing]
    split_dataset -- split a dataset by episode into train and held-out parts [split]
    inspect_dataset -- a report on a dataset (also ``qadapt inspect``) [inspection]
    dataset_statistics, DatasetStatistics -- counts, returns, success, action ranges [statistics]
    check_spaces -- compare a dataset's spaces with an env's or a checkpoint's [spaces]
    MixtureSampler -- batches mixed from several datasets in given shares [mixture]
    LinearShareSchedule, check_shares -- share vectors and their schedule [shares]
    ReplayBatch -- the batch handed to the learner [batch]
    write_synthetic_dataset -- invented data of a given size, for benchmarks and tests [synthetic]

The format itself is documented in docs/datasets.md.
"""

from qadapt.data.batch import ReplayBatch
from qadapt.data.collect import CollectionSummary, collect
from qadapt.data.dataset import ReplayDataset, open_dataset
from qadapt.data.importing import import_arrays
from qadapt.data.inspection import inspect_dataset
from qadapt.data.mixture import MixtureSampler
from qadapt.data.policy import Policy, UniformRandomPolicy
from qadapt.data.shares import LinearShareSchedule, check_shares
from qadapt.data.spaces import check_spaces
from qadapt.data.split import split_dataset
from qadapt.data.statistics import DatasetStatistics, dataset_statistics
from qadapt.data.synthetic import write_synthetic_dataset
from qadapt.data.writer import DatasetWriter

__all__ = [
    "CollectionSummary",
    "DatasetStatistics",
    "DatasetWriter",
    "LinearShareSchedule",
    "MixtureSampler",
    "Policy",
    "ReplayBatch",
    "ReplayDataset",
    "UniformRandomPolicy",
    "check_shares",
    "check_spaces",
    "collect",
    "dataset_statistics",
    "import_arrays",
    "inspect_dataset",
    "open_dataset",
    "split_dataset",
    "write_synthetic_dataset",
]
