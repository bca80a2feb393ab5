"""The strategies a study compares: an init strategy plus which data it trains on.

Holds:
    StudyArm -- one strategy of a study: its name, init strategy and whether it sees prior data.
    STUDY_ARMS -- arm name -> StudyArm (``strategies=[warm,scratch_new,...]`` in a study).
    study_arm -- look an arm up, with a clear error for an unknown name.

Every arm gets the same new data, gradient steps and settings; they differ only in how the
critics start (``init``) and whether batches also draw from the prior data.
"""

from __future__ import annotations

from dataclasses import dataclass

from qadapt.errors import BadInput


@dataclass(frozen=True)
class StudyArm:
    """One strategy: ``init`` names an init strategy (configs/init/), ``uses_prior`` says
    whether batches mix the prior data in at the study's share (else: new data only).

    Example:
        >>> STUDY_ARMS["scratch_new"].finetune_overrides(share=0.5)
        ['init=scratch', 'share=1.0']
    """

    name: str
    init: str
    uses_prior: bool
    summary: str

    def finetune_overrides(self, share: float) -> list[str]:
        return [f"init={self.init}", f"share={share if self.uses_prior else 1.0}"]


STUDY_ARMS: dict[str, StudyArm] = {arm.name: arm for arm in (
    StudyArm("warm", "warm", True, "every pretrained weight, prior + new data"),
    StudyArm("scratch_new", "scratch", False, "random weights, new data only"),
    StudyArm("scratch_mix", "scratch", True, "random weights, prior + new data"),
    StudyArm("torso", "torso", True, "pretrained torso, fresh head, prior + new data"),
    StudyArm("frozen_torso", "frozen_torso", True,
             "pretrained torso kept fixed, fresh head, prior + new data"),
    StudyArm("auxiliary", "auxiliary", True,
             "torso pretrained by return-to-go regression, fresh head, prior + new data"),
    StudyArm("anchored", "anchored", True, "warm start with an L2-SP penalty, prior + new data"),
)}


def study_arm(name: str, key: str = "strategies") -> StudyArm:
    if name not in STUDY_ARMS:
        raise BadInput(f"{key}: got {name!r}, expected one of {', '.join(STUDY_ARMS)}")
    return STUDY_ARMS[name]
