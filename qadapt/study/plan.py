"""A study's plan: which datasets to collect and which cells to run, fixed before any runs.

Holds:
    DataRequest -- one new dataset: variation, episodes, seed, where it goes.
    Cell -- one unit of work (the base evaluation, a fine-tuning run or a chain).
    StudyPlan -- the cells and datasets of a study, with a digest; ``cells.json`` on disk.
    build_plan -- StudyJob (+ base checkpoint and prior data paths) -> StudyPlan.

Cell ids name what differs between cells (``warm__finger_offset__n100__share0.5__seed0``),
so a results row can be traced to its command line by eye.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path
from typing import Any

from qadapt import layout
from qadapt.errors import BadInput
from qadapt.files import strict_json, write_text_durably
from qadapt.jobs.training_run import plain
from qadapt.study.arms import study_arm


def _derived_seed(*parts: Any) -> int:
    """A fixed seed for a named thing, so adding cells never changes another cell's data."""
    text = "/".join(map(str, parts))
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:4], "big") % (2**31 - 1)


@dataclasses.dataclass(frozen=True)
class DataRequest:
    variation: str
    episodes: int
    seed: int
    path: str

    @property
    def collection_seed(self) -> int:
        return _derived_seed("new-data", self.variation, self.episodes, self.seed)


@dataclasses.dataclass(frozen=True)
class Cell:
    """``kind``: "base" (evaluate the base checkpoint), "finetune" or "chain" (``rounds``
    rounds per variation: above 1 for the study's rounds of adaptation)."""

    id: str
    kind: str
    arm: str | None = None
    variation: str | None = None
    seed: int | None = None
    episodes: int = 0
    share: float = 0.0
    data: str | None = None
    variations: tuple[str, ...] = ()
    indicator: str = "none"
    rounds: int = 1
    steps: int | None = None  # gradient steps per run (null: the study's steps)


@dataclasses.dataclass
class StudyPlan:
    base: str
    prior: str
    settings: dict[str, Any]
    data: list[DataRequest]
    cells: list[Cell]

    @property
    def digest(self) -> str:
        text = json.dumps(self.to_json(with_digest=False), sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()

    def cell(self, cell_id: str) -> Cell:
        for cell in self.cells:
            if cell.id == cell_id:
                return cell
        raise BadInput(f"cell: {cell_id!r} is not a cell of this study")

    def to_json(self, with_digest: bool = True) -> dict[str, Any]:
        value = {
            "base": self.base, "prior": self.prior, "settings": self.settings,
            "data": [dataclasses.asdict(d) for d in self.data],
            "cells": [dataclasses.asdict(c) for c in self.cells],
        }
        return {**value, "digest": self.digest} if with_digest else value

    @classmethod
    def from_json(cls, value: dict[str, Any]) -> StudyPlan:
        return cls(value["base"], value["prior"], value["settings"],
                   [DataRequest(**d) for d in value["data"]],
                   [Cell(**{**c, "variations": tuple(c["variations"])})
                    for c in value["cells"]])

    @classmethod
    def read(cls, study_dir: Path) -> StudyPlan:
        path = Path(study_dir) / layout.PLAN
        try:
            return cls.from_json(json.loads(path.read_text()))
        except (OSError, ValueError, KeyError, TypeError) as err:
            raise BadInput(f"{path}: not a readable study plan ({err})") from err

    def write(self, study_dir: Path) -> None:
        """Write ``cells.json``; refuse a directory that holds a different study's plan."""
        path = Path(study_dir) / layout.PLAN
        if path.exists():
            stored = StudyPlan.read(study_dir)
            if stored.digest != self.digest:
                raise BadInput(f"{path}: this directory holds a different study (plan digest "
                               f"{stored.digest[:12]}, this command {self.digest[:12]}); "
                               "choose another out=")
            return
        write_text_durably(path, strict_json(self.to_json(), indent=2, sort_keys=True))


def _finetune_cell(cells: dict, data: dict, study_dir: Path, arm_name: str,
                   variation: str, episodes: int, share: float, seed: int,
                   indicator: str = "none") -> None:
    arm = study_arm(arm_name)
    share = share if arm.uses_prior else 1.0
    key = (variation, episodes, seed)
    if key not in data:
        data[key] = DataRequest(variation, episodes, seed,
                                str(study_dir / "data" / f"{variation}__n{episodes}__seed{seed}"))
    tag = "" if indicator == "none" else f"__{indicator}"
    cell_id = f"{arm.name}__{variation}__n{episodes}__share{share:g}{tag}__seed{seed}"
    cells.setdefault(cell_id, Cell(cell_id, "finetune", arm.name, variation, seed, episodes,
                                   share, data[key].path, indicator=indicator))


def build_plan(cfg, base: str, prior: str, study_dir: Path) -> StudyPlan:
    """Every cell of ``cfg`` (a StudyJob) in a fixed order, and the datasets they need."""
    cells: dict[str, Cell] = {"base": Cell("base", "base")}
    data: dict[tuple, DataRequest] = {}
    for variation in cfg.variations:
        for arm in cfg.strategies:
            for seed in cfg.seeds:
                _finetune_cell(cells, data, study_dir, arm, variation, cfg.episodes,
                               cfg.share, seed)
    for episodes in cfg.budgets.values:
        for arm in cfg.budgets.strategies:
            for seed in cfg.seeds:
                _finetune_cell(cells, data, study_dir, arm, cfg.budgets.variation,
                               episodes, cfg.share, seed)
    for share in cfg.shares.values:
        for arm in cfg.shares.strategies:
            if not study_arm(arm).uses_prior:
                continue  # a new-data-only arm has no share to sweep
            for seed in cfg.seeds:
                _finetune_cell(cells, data, study_dir, arm, cfg.shares.variation,
                               cfg.episodes, float(share), seed)
    for kind in cfg.indicators.kinds:
        for arm in cfg.indicators.strategies:
            if not study_arm(arm).uses_prior:
                continue  # one source: an indicator would be a constant column
            for seed in cfg.seeds:
                _finetune_cell(cells, data, study_dir, arm, cfg.indicators.variation,
                               cfg.episodes, cfg.share, seed, indicator=kind)
    for arm in cfg.chain.strategies if cfg.chain.variations else []:
        for seed in cfg.seeds:
            cell_id = f"chain__{arm}__seed{seed}"
            cells[cell_id] = Cell(cell_id, "chain", arm, None, seed, cfg.episodes, cfg.share,
                                  None, tuple(cfg.chain.variations))
    for arm in cfg.rounds.strategies if cfg.rounds.variation is not None else []:
        for seed in cfg.seeds:
            cell_id = f"rounds__{arm}__{cfg.rounds.variation}__seed{seed}"
            cells[cell_id] = Cell(cell_id, "chain", arm, None, seed,
                                  cfg.rounds.episodes or cfg.episodes, cfg.share, None,
                                  (cfg.rounds.variation,), rounds=cfg.rounds.count,
                                  steps=cfg.rounds.steps)
    settings = {k: plain(v) for k, v in dataclasses.asdict(cfg).items()
                if k not in ("out", "launcher_overrides", "report_reps", "level",
                              "filmstrip_episodes")}
    return StudyPlan(str(base), str(prior), settings, list(data.values()), list(cells.values()))
