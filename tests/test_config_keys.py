"""Every config key reaches the runtime object it configures, and every runtime setting has a key.

The network, maximiser and learner nodes are made from the runtime objects themselves
(``QNetworkConfig``, ``CrossEntropyMaximizer``'s constructor, ``LearnerConfig``), so a new
runtime setting is a new config key with the same default, and a key no runtime object reads
cannot exist. Checked here against the files in configs/ (read with OmegaConf, the reference
reader of Hydra's YAML) and against the objects the jobs build.
"""

from __future__ import annotations

import dataclasses
import inspect
from pathlib import Path

import gymnasium as gym
import pytest
from omegaconf import OmegaConf

from qadapt.config.training_schema import (
    LEARNER_UNDECIDED,
    MAXIMIZER_CHOICE,
    MAXIMIZER_UNDECIDED,
    NETWORK_UNDECIDED,
    LearnerSettings,
    MaximizerSettings,
    NetworkSettings,
    build_learner_config,
    build_runtime,
)
from qadapt.errors import BadInput
from qadapt.jobs.training_run import build_maximizer
from qadapt.learner import LearnerConfig
from qadapt.maximize import CrossEntropyMaximizer
from qadapt.nets import QNetworkConfig

CONFIGS = Path(__file__).resolve().parents[1] / "configs"


def _runtime_settings(runtime) -> dict[str, object]:
    if dataclasses.is_dataclass(runtime):
        return {f.name: f.default for f in dataclasses.fields(runtime)}
    return {name: p.default for name, p in inspect.signature(runtime).parameters.items()
            if name not in ("low", "high")}


# Fields whose node default is left for the job to settle from the data ("auto") or the base
# checkpoint (None), and the field that chooses among maximisers.
UNDECIDED = {"network": {k: d for k, (_, d) in NETWORK_UNDECIDED.items()},
             "maximizer": {k: d for k, (_, d) in MAXIMIZER_UNDECIDED.items()},
             "learner": {k: d for k, (_, d) in LEARNER_UNDECIDED.items()}}
CHOOSING = {"network": {}, "maximizer": {n: d for n, _, d in MAXIMIZER_CHOICE}, "learner": {}}
GROUPS = [("network", NetworkSettings, QNetworkConfig),
          ("maximizer", MaximizerSettings, CrossEntropyMaximizer),
          ("learner", LearnerSettings, LearnerConfig)]


@pytest.mark.parametrize(("group", "node", "runtime"), GROUPS, ids=[g[0] for g in GROUPS])
def test_the_node_has_exactly_the_runtime_settings_and_defaults(group, node, runtime):
    made = node()
    defaults = {k: tuple(v) if isinstance(v, list) else v
                for k, v in dataclasses.asdict(made).items()}
    assert defaults == {**CHOOSING[group], **_runtime_settings(runtime), **UNDECIDED[group]}


@pytest.mark.parametrize(("group", "node", "runtime"), GROUPS, ids=[g[0] for g in GROUPS])
def test_every_key_in_the_group_files_is_a_runtime_setting(group, node, runtime):
    files = sorted((CONFIGS / group).glob("*.yaml"))
    assert files
    accepted = set(_runtime_settings(runtime))
    for path in files:
        keys = set(OmegaConf.to_container(OmegaConf.load(path))) - {"defaults"}
        unknown = sorted(keys - accepted - set(CHOOSING[group]))
        assert not unknown, f"{path.name}: {unknown} reach nothing"


def test_a_group_file_reaches_the_built_objects():
    learner_file = OmegaConf.to_container(OmegaConf.load(CONFIGS / "learner" / "per_batch.yaml"))
    learner_file.pop("defaults", None)
    settled = {"loss": "mse", "reward_scale": 1.0, "reward_shift": 0.0, "learning_rate": 3e-4,
               "refresh_every": 500}  # what the job settles before building
    built = build_learner_config(LearnerSettings(**{**settled, **learner_file}))
    assert {k: getattr(built, k) for k in learner_file} == learner_file

    network = build_runtime(QNetworkConfig, NetworkSettings(form="concat", torso=[8, 4],
                                                            output="linear"), "network")
    assert (network.form, network.torso) == ("concat", (8, 4))

    space = gym.spaces.Box(-1.0, 1.0, (2,))
    cem = build_maximizer(MaximizerSettings(samples=12, elites=3, smoothing=0.25), space)
    assert (cem.samples, cem.elites, cem.smoothing) == (12, 3, 0.25)


def test_a_bad_setting_is_refused_under_its_key():
    with pytest.raises(BadInput, match=r"^network\.form: got 'wide'"):
        build_runtime(QNetworkConfig, NetworkSettings(form="wide"), "network")
    with pytest.raises(BadInput, match=r"^maximizer\.elites"):
        build_maximizer(MaximizerSettings(samples=4, elites=8), gym.spaces.Box(-1.0, 1.0, (2,)))
