"""Filmstrips: a few rendered episodes per strategy on one variation, one PNG per strategy.

Holds:
    write_filmstrips -- ``filmstrips/<strategy>.png`` in a study directory, for pick-cell runs.

Each strip shows every other frame of ``episodes`` greedy episodes of the strategy's first
seed on the study's first variation (the same scenes for every strategy), one row per
episode, the last frame titled with the outcome.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import gymnasium as gym
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from qadapt.checkpoint import load_checkpoint
from qadapt.config.compose import variation_by_name
from qadapt.config.schema import EnvConfig
from qadapt.envs import env_creator, env_kwargs, make_vector_env
from qadapt.errors import BadInput
from qadapt.layout import resolve_checkpoint
from qadapt.learner.loading import checkpoint_policy
from qadapt.spaces import env_actions

FRAME_STEP = 2
FILMSTRIP_SEED = 4242


def _frames(env_id: str, checkpoint: str, variation,
            episodes: int) -> list[tuple[list[np.ndarray], bool]]:
    config = EnvConfig(id=env_id)
    probe = make_vector_env(config, variation, 1)
    policy = checkpoint_policy(checkpoint, probe, seed=FILMSTRIP_SEED)
    env = gym.make(env_id, render_mode="rgb_array", **env_kwargs(config, variation))
    strips = []
    for episode in range(episodes):
        obs, _ = env.reset(seed=FILMSTRIP_SEED + episode)
        frames, success, done, step = [env.render()], False, False, 0
        while not done:
            action = env_actions(env.action_space, policy.act(obs[None]))[0]
            obs, _, terminated, truncated, info = env.step(action)
            step += 1
            done = terminated or truncated
            success = success or bool(info.get("is_success", False))
            if step % FRAME_STEP == 0 or done:
                frames.append(env.render())
        strips.append((frames, success))
    env.close()
    return strips


def _render_modes(env_id: str) -> list[str]:
    """The render modes the env's class declares (none for an id that is not registered)."""
    try:
        creator = env_creator(env_id)
    except BadInput:
        return []
    return list(getattr(creator, "metadata", {}).get("render_modes") or [])


def _draw(strips, title: str, path: Path) -> None:
    columns = max(len(frames) for frames, _ in strips)
    figure = Figure(figsize=(1.2 * columns, 1.35 * len(strips) + 0.4))
    FigureCanvasAgg(figure)
    figure.suptitle(title, fontsize=9)
    for row, (frames, success) in enumerate(strips):
        for column in range(columns):
            axes = figure.add_subplot(len(strips), columns, row * columns + column + 1)
            axes.set_axis_off()
            if column < len(frames):
                axes.imshow(frames[column])
            if column == len(frames) - 1:
                axes.set_title("picked" if success else "not picked", fontsize=7)
    figure.savefig(path, dpi=80)


def write_filmstrips(study_dir: Path, plan, rows: list[dict[str, Any]], episodes: int) -> None:
    """One PNG per strategy (first seed, first variation); nothing for other envs."""
    if episodes < 1 or not rows:
        return

    env_id = load_checkpoint(resolve_checkpoint(plan.base)).metadata.env_id
    if "rgb_array" not in _render_modes(env_id):
        return
    variation_name = plan.settings["variations"][0]
    first_seed = plan.settings["seeds"][0]
    chosen: dict[str, str] = {"base": plan.base}
    for row in rows:
        if (row["chain_step"] is None and row["variation"] == variation_name
                and row["seed"] == first_seed and row["new_episodes"] == plan.settings["episodes"]
                and row["strategy"] not in chosen):
            chosen[row["strategy"]] = row["checkpoint"]
    out = Path(study_dir) / "filmstrips"
    out.mkdir(exist_ok=True)
    variation = variation_by_name(variation_name)
    for strategy, checkpoint in chosen.items():
        path = out / f"{strategy}.png"
        if path.exists():
            continue
        _draw(_frames(env_id, checkpoint, variation, episodes),
              f"{strategy} on {variation_name}, seed {first_seed}", path)
