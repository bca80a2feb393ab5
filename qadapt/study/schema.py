"""Dataclass schemas of ``qadapt study`` (a grid of fine-tuning runs) and its cells.

Holds:
    BasePlan -- how a study makes its prior data and base checkpoint when none are given.
    SweepPlan -- a one-dimensional sweep (data budgets or shares) on one variation.
    IndicatorPlan -- runs with a source indicator (prior and new data told apart).
    ChainPlan -- the chain a study runs (variations in order) and with which strategies.
    RoundsPlan -- rounds of adaptation on one variation, each exploring with the latest result.
    StudyJob -- the whole study: variations x strategies x seeds, sweeps, chain, evaluation.
    CellJob -- ``qadapt cell``: one cell of a study, as its launcher runs it.
    register_study_schemas -- put them into Hydra's ConfigStore.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from hydra.core.config_store import ConfigStore

from qadapt import layout
from qadapt.config.compose import variation_by_name
from qadapt.config.schema import _positive_int
from qadapt.errors import BadInput
from qadapt.learner.source_indicator import INDICATOR_KINDS
from qadapt.study.arms import study_arm


def _names(key: str, values, check) -> list[str]:
    values = [str(v) for v in values]
    if len(set(values)) != len(values):
        raise BadInput(f"{key}: got {values}, which repeats a name")
    for value in values:
        check(value, key=key)
    return values


def _needs_prior(key: str, names: list[str]) -> None:
    """Chains and rounds train on prior plus new data: refuse a new-data-only arm."""
    for name in names:
        if not study_arm(name).uses_prior:
            raise BadInput(f"{key}: {name!r} trains on new data only; chains and rounds "
                           "train on prior plus new data")


@dataclass
class BasePlan:
    """Prior data from the scripted picker in the unperturbed cell, then pretraining
    (``pretrain``: extra ``qadapt pretrain`` overrides, e.g. ``learner.refresh_every=100``)."""

    episodes: int = 2000
    noise: float = 0.15
    seed: int = 0
    pretrain_steps: int = 4000
    pretrain: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        _positive_int("make_base.episodes", self.episodes)
        _positive_int("make_base.pretrain_steps", self.pretrain_steps)


@dataclass
class SweepPlan:
    """``values`` on ``variation`` for ``strategies`` (every seed); empty values: no sweep."""

    variation: str = "finger_offset"
    values: list[float] = field(default_factory=list)
    strategies: list[str] = field(default_factory=lambda: ["warm"])


@dataclass
class IndicatorPlan:
    """Runs with a source indicator (``kinds``: flag, per_source) on ``variation`` for
    ``strategies`` (every seed) at the headline budget and share; empty kinds: none."""

    variation: str = "finger_offset"
    kinds: list[str] = field(default_factory=list)
    strategies: list[str] = field(default_factory=lambda: ["warm"])


@dataclass
class ChainPlan:
    """A chain over ``variations`` (empty: no chain) for each of ``strategies`` and seed."""

    variations: list[str] = field(default_factory=list)
    strategies: list[str] = field(default_factory=lambda: ["warm"])
    explore: str = "base"


@dataclass
class RoundsPlan:
    """``count`` rounds of adaptation on ``variation`` (null: none) for each of ``strategies``
    and seed: ``qadapt chain rounds=count``, the first round exploring with the base, every
    later one with the previous round's result. ``episodes`` new episodes and ``steps``
    gradient steps per round (null: the study's ``episodes`` and ``steps``).

    ``retrain``: strategies trained once, from the base, on the data each strategy's rounds
    collected (prior and earlier rounds on the prior side, the last round as new data, as in
    the last round), for as many gradient steps as all the rounds together: do the rounds
    beat one long run on the same data?"""

    variation: str | None = None
    count: int = 4
    strategies: list[str] = field(default_factory=lambda: ["warm"])
    episodes: int | None = None
    steps: int | None = None
    retrain: list[str] = field(default_factory=list)


@dataclass
class StudyJob:
    """``qadapt study``: every cell of a grid, resumable, then the report.

    The headline grid is ``variations x strategies x seeds`` at ``episodes`` new episodes and
    ``share`` new data; ``budgets``, ``shares`` and ``indicators`` add sweeps on one
    variation, ``chain`` a chain of adaptations, ``rounds`` repeated adaptations of one
    variation. ``finetune`` holds overrides every
    fine-tuning run gets (any ``qadapt finetune`` key, e.g. ``eval.every=250``).
    ``base``/``prior`` name an existing checkpoint and dataset; left null, ``make_base``
    says how to make them. Cells run through Hydra's multirun with the ``launcher`` group's
    choice (local, parallel, cluster, cluster_local; configs/launcher/) and
    ``launcher_overrides`` (e.g. ``hydra.launcher.partition=cpu``).
    """

    out: str | None = None
    base: str | None = None
    prior: str | None = None
    make_base: BasePlan = field(default_factory=BasePlan)
    variations: list[str] = field(default_factory=lambda: ["finger_offset"])
    strategies: list[str] = field(default_factory=lambda: ["warm", "scratch_new"])
    seeds: list[int] = field(default_factory=lambda: [0, 1, 2])
    episodes: int = 100
    share: float = 0.5
    steps: int = 1500
    explore_noise: float = 0.1
    budgets: SweepPlan = field(default_factory=SweepPlan)
    shares: SweepPlan = field(default_factory=SweepPlan)
    indicators: IndicatorPlan = field(default_factory=IndicatorPlan)
    chain: ChainPlan = field(default_factory=ChainPlan)
    rounds: RoundsPlan = field(default_factory=RoundsPlan)
    finetune: list[str] = field(default_factory=list)
    eval_episodes: int = 200
    eval_seed: int = 777
    level: float = 0.5
    filmstrip_episodes: int = 2
    launcher_overrides: list[str] = field(default_factory=list)
    report_reps: int = 2000

    def __post_init__(self) -> None:
        for key in ("base", "prior"):
            value = getattr(self, key)
            if value is not None and not Path(value).exists():
                raise BadInput(f"{key}: {value} does not exist")
        if (self.base is None) != (self.prior is None):
            raise BadInput("base and prior: give both (an existing study base) or neither "
                           "(the study makes them as make_base says)")
        self.variations = _names("variations", self.variations, variation_by_name)
        self.strategies = _names("strategies", self.strategies, study_arm)
        if not self.variations or not self.strategies:
            raise BadInput("variations and strategies: a study needs at least one of each")
        if not self.seeds or len(set(self.seeds)) != len(self.seeds):
            raise BadInput(f"seeds: got {self.seeds}, expected distinct seeds")
        for seed in self.seeds:
            if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
                raise BadInput(f"seeds: got {seed!r}, expected non-negative integers")
        _positive_int("episodes", self.episodes)
        _positive_int("steps", self.steps)
        _positive_int("eval_episodes", self.eval_episodes)
        if not 0.0 < self.share < 1.0:
            raise BadInput(f"share: got {self.share!r}, expected a number in (0, 1)")
        if not 0.0 <= self.explore_noise <= 2.0:
            raise BadInput(f"explore_noise: got {self.explore_noise!r}, expected [0, 2]")
        if not 0.0 < self.level < 1.0:
            raise BadInput(f"level: got {self.level!r}, expected a number in (0, 1)")
        for key, sweep in (("budgets", self.budgets), ("shares", self.shares)):
            if sweep.values:
                variation_by_name(sweep.variation, key=f"{key}.variation")
                sweep.strategies = _names(f"{key}.strategies", sweep.strategies, study_arm)
        for value in self.budgets.values:
            if not (float(value).is_integer() and value >= 1):
                raise BadInput(f"budgets.values: got {value!r}, expected positive episode "
                               "counts")
        self.budgets.values = [int(v) for v in self.budgets.values]
        for value in self.shares.values:
            if not 0.0 < value <= 1.0:
                raise BadInput(f"shares.values: got {value!r}, expected new-data shares in "
                               "(0, 1]")
        if self.indicators.kinds:
            variation_by_name(self.indicators.variation, key="indicators.variation")
            for kind in self.indicators.kinds:
                if kind not in INDICATOR_KINDS[1:]:
                    raise BadInput(f"indicators.kinds: got {kind!r}, expected "
                                   f"{' or '.join(INDICATOR_KINDS[1:])}")
            self.indicators.strategies = _names("indicators.strategies",
                                                self.indicators.strategies, study_arm)
        if self.chain.variations:
            self.chain.variations = [str(v) for v in self.chain.variations]
            for name in self.chain.variations:
                variation_by_name(name, key="chain.variations")
            self.chain.strategies = _names("chain.strategies", self.chain.strategies,
                                           study_arm)
            _needs_prior("chain.strategies", self.chain.strategies)
            if self.chain.explore not in ("base", "latest"):
                raise BadInput(f"chain.explore: got {self.chain.explore!r}, expected base or "
                               "latest")
        if self.rounds.variation is not None:
            variation_by_name(self.rounds.variation, key="rounds.variation")
            _positive_int("rounds.count", self.rounds.count)
            _positive_int("rounds.episodes", self.rounds.episodes, allow_none=True)
            _positive_int("rounds.steps", self.rounds.steps, allow_none=True)
            self.rounds.strategies = _names("rounds.strategies", self.rounds.strategies,
                                            study_arm)
            _needs_prior("rounds.strategies", self.rounds.strategies)
            self.rounds.retrain = _names("rounds.retrain", self.rounds.retrain, study_arm)
            _needs_prior("rounds.retrain", self.rounds.retrain)
            if self.rounds.retrain and self.rounds.count < 2:
                raise BadInput(f"rounds.retrain: needs rounds.count of at least 2, got "
                               f"{self.rounds.count}")


@dataclass
class CellJob:
    """``qadapt cell study=DIR cell=ID``: run one cell of a study (its launcher calls this)."""

    study: str = "???"
    cell: str = "???"

    def __post_init__(self) -> None:
        if not (Path(self.study) / layout.PLAN).is_file():
            raise BadInput(f"study: {self.study} holds no cells.json (run qadapt study first)")


STUDY_SCHEMAS: dict[str, tuple[str | None, type]] = {
    "study_schema": (None, StudyJob),
    "cell_schema": (None, CellJob),
}


def register_study_schemas() -> None:
    store = ConfigStore.instance()
    for name, (group, node) in STUDY_SCHEMAS.items():
        store.store(name=name, node=node, group=group)
