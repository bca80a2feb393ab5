"""What a dataset holds, for people and for scripts (``qadapt inspect``: jobs/inspect_job.py).

Holds:
    inspect_dataset -- a report (plain JSON data) of a dataset: counts, episode lengths,
        returns, success, action ranges, provenance and whether its checksums hold.
    report_text -- the report as human-readable text.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from qadapt.data.format.dataset import open_dataset
from qadapt.data.statistics import dataset_statistics
from qadapt.errors import BadInput


def inspect_dataset(path: str | Path) -> dict[str, Any]:
    """A report on the dataset at ``path``.

    Structure problems (no manifest, bad manifest, missing or truncated files) raise
    BadInput. A checksum or content failure is reported instead (``checksums_ok`` false,
    ``problem`` says what), and figures computed from the arrays are then None.

    Example:
        >>> import tempfile
        >>> from qadapt.data.writing.synthetic import write_synthetic_dataset
        >>> p = write_synthetic_dataset(Path(tempfile.mkdtemp()) / "s", transitions=400)
        >>> r = inspect_dataset(p)
        >>> r["transitions"], r["episodes"], r["success_rate"], r["checksums_ok"]
        (400, 4, 0.5, True)
    """
    dataset = open_dataset(path, verify=False)
    manifest = dataset.manifest
    problem = None
    try:
        dataset.verify()
    except BadInput as err:
        problem = str(err)
    report: dict[str, Any] = {
        "path": str(dataset.path),
        "format_version": manifest.format_version,
        "created_at": manifest.created_at,
        "transitions": manifest.transition_count,
        "episodes": manifest.episode_count,
        "checksums_ok": problem is None,
        "problem": problem,
        "success_reported": manifest.has_success,
    }
    if problem is None:
        stats = dataset_statistics(dataset)
        report.update(
            finished_episodes=stats.finished_episodes,
            terminated_episodes=stats.terminated_episodes,
            truncated_episodes=stats.truncated_episodes,
            episode_length={
                "min": stats.episode_length_min,
                "mean": stats.episode_length_mean,
                "max": stats.episode_length_max,
            },
            episode_return={
                "mean": stats.return_mean,
                "std": stats.return_std,
                "min": stats.return_min,
                "max": stats.return_max,
            },
            success_rate=stats.success_rate,
            successful_episodes=stats.successful_episodes,
            action_ranges=[
                {"min": low, "max": high}
                for low, high in zip(stats.action_min, stats.action_max, strict=True)
            ],
        )
    else:
        report.update(
            finished_episodes=None,
            terminated_episodes=None,
            truncated_episodes=None,
            episode_length=None,
            episode_return=None,
            success_rate=None,
            successful_episodes=None,
            action_ranges=None,
        )
    report.update(
        environment=manifest.environment.to_json(),
        observation_space=manifest.observation_space.to_json(),
        action_space=manifest.action_space.to_json(),
        collected_by=manifest.collected_by,
        seed=manifest.seed,
        split=None if manifest.split is None else manifest.split.to_json(),
    )
    return report


def _number(value: float | None, digits: int = 3) -> str:
    return "n/a" if value is None else f"{value:.{digits}f}"


def _space_text(space: dict[str, Any]) -> str:
    if space["type"] == "discrete":
        return f"Discrete, {space['n']} actions from {space['start']}"
    return f"Box of shape {tuple(space['shape'])}, {space['dtype']}"


def report_text(report: dict[str, Any]) -> str:
    """The report as aligned ``label  value`` lines."""
    lines = [f"Dataset {report['path']}"]

    def add(label: str, value: str) -> None:
        lines.append(f"  {label:<18}{value}")

    add("format", f"version {report['format_version']}, written {report['created_at']}")
    add("transitions", f"{report['transitions']:,}")
    episodes = f"{report['episodes']:,}"
    if report["finished_episodes"] is not None:
        cut = report["episodes"] - report["finished_episodes"]
        episodes += (
            f" ({report['terminated_episodes']:,} terminated, "
            f"{report['truncated_episodes']:,} truncated, {cut:,} cut off)"
        )
    add("episodes", episodes)
    if report["episode_length"] is not None:
        length = report["episode_length"]
        add(
            "episode length",
            f"shortest {length['min']}, mean {length['mean']:.1f}, longest {length['max']}",
        )
        ret = report["episode_return"]
        add(
            "episode return",
            f"mean {_number(ret['mean'])} (sd {_number(ret['std'])}), "
            f"from {_number(ret['min'])} to {_number(ret['max'])}",
        )
    if not report["success_reported"]:
        add("success rate", "unknown (the environment reported no success flag)")
    elif report["success_rate"] is not None:
        add(
            "success rate",
            f"{report['success_rate']:.3f} ({report['successful_episodes']:,} "
            f"of {report['finished_episodes']:,} finished episodes)",
        )
    else:
        add("success rate", "n/a")
    if report["action_ranges"] is not None:
        for i, bounds in enumerate(report["action_ranges"]):
            label = "action ranges" if i == 0 else ""
            add(label, f"[{i}] {bounds['min']:.4g} .. {bounds['max']:.4g}")
    env = report["environment"]
    kwargs = json.dumps(env["kwargs"], sort_keys=True)
    add("environment", f"{env['id']} {kwargs}")
    add("wrappers", ", ".join(json.dumps(w) for w in env["wrappers"]) or "none")
    add("observations", _space_text(report["observation_space"]))
    add("actions", _space_text(report["action_space"]))
    add("collected by", json.dumps(report["collected_by"], sort_keys=True))
    add("seed", str(report["seed"]))
    split = report["split"]
    if split is not None:
        add(
            "split",
            f"{split['part']} part of {split['parent_path']} (held-out fraction "
            f"{split['held_out_fraction']}, seed {split['seed']}, parent had "
            f"{split['parent_episode_count']} episodes)",
        )
    add("checksums", "ok" if report["checksums_ok"] else f"FAILED: {report['problem']}")
    return "\n".join(lines)
