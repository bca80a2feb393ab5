"""Lineage: which checkpoint came from which checkpoint and which data, as a tree.

Holds:
    LineageNode -- one checkpoint: path, identity, step, how it started, its data, its parent.
    checkpoint_lineage -- follow a checkpoint's parents (through its run's lineage.json).
    lineage_text -- the tree as indented text (``qadapt inspect`` on a checkpoint or chain).
    lineage_record -- the same as JSON-able data (``--json``).
    is_lineage_path -- whether ``qadapt inspect`` should show a lineage for a path.

A training run writes ``lineage.json`` beside its checkpoints (parent path and identity,
datasets by path and fingerprint); each checkpoint's metadata repeats the parent's identity
and the datasets' fingerprints. Following the parents checks both: a parent that is missing
or whose identity changed is shown as such, never silently skipped.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path
from typing import Any

from qadapt import layout
from qadapt.checkpoint.store import load_checkpoint
from qadapt.errors import BadInput
from qadapt.layout import resolve_checkpoint


@dataclasses.dataclass
class LineageNode:
    path: str
    identity: str | None
    step: int | None = None
    initialisation: str | None = None
    datasets: list[dict[str, str]] = dataclasses.field(default_factory=list)
    parent: LineageNode | None = None
    problem: str | None = None


def _resolve(path: Path) -> Path:
    return resolve_checkpoint(path, key="inspect")


def checkpoint_lineage(path: str | Path, expected_identity: str | None = None,
                       depth: int = 0) -> LineageNode:
    """The lineage tree of the checkpoint (or run directory) at ``path``."""
    try:
        checkpoint = _resolve(Path(path))
        loaded = load_checkpoint(checkpoint)
    except BadInput as err:
        return LineageNode(str(path), expected_identity, problem=f"cannot be read ({err})")
    meta = loaded.metadata
    init = meta.extra.get("initialisation") if isinstance(meta.extra, dict) else None
    node = LineageNode(
        str(checkpoint), loaded.identity, meta.gradient_step,
        None if not isinstance(init, dict) else str(init.get("name")),
        [{"path": d.path, "sha256": d.sha256} for d in meta.datasets])
    if expected_identity is not None and loaded.identity != expected_identity:
        node.problem = (f"identity {loaded.identity[:12]} differs from the "
                        f"{expected_identity[:12]} its child recorded")
    if meta.parent_checkpoint is None or depth > 64:
        return node
    record = checkpoint.parent / ".." / layout.LINEAGE
    parent_path = None
    if record.exists():
        try:
            parent_path = (json.loads(record.read_text()).get("parent_checkpoint") or {}).get(
                "path")
        except ValueError:
            parent_path = None
    if parent_path is None:
        node.parent = LineageNode("?", meta.parent_checkpoint,
                                  problem="its path is not recorded (no lineage.json)")
    elif not Path(parent_path).exists():
        node.parent = LineageNode(parent_path, meta.parent_checkpoint, problem="missing")
    else:
        node.parent = checkpoint_lineage(parent_path, meta.parent_checkpoint, depth + 1)
    return node


def _lines(node: LineageNode, prefix: str = "") -> list[str]:
    head = f"checkpoint {node.path}"
    details = []
    if node.identity:
        details.append(f"sha256 {node.identity[:12]}")
    if node.step is not None:
        details.append(f"step {node.step}")
    if node.initialisation:
        details.append(f"init {node.initialisation}")
    if details:
        head += f"  ({', '.join(details)})"
    if node.problem:
        head += f"  [{node.problem}]"
    lines = [head]
    children = [f"data {d['path']}  (sha256 {d['sha256'][:12]})" for d in node.datasets]
    for index, text in enumerate(children):
        last = index == len(children) - 1 and node.parent is None
        lines.append(f"{prefix}{'└─ ' if last else '├─ '}{text}")
    if node.parent is not None:
        sub = _lines(node.parent, prefix + "   ")
        lines.append(f"{prefix}└─ parent: {sub[0]}")
        lines.extend(sub[1:])
    return lines


def _chain(path: Path) -> tuple[dict[str, Any], LineageNode | None]:
    try:
        record = json.loads((path / layout.CHAIN_RECORD).read_text())
        steps, plan = record["steps"], record["plan"]
        summary = {"chain": str(path), "variations": list(plan["variations"]),
                   "finished_steps": len(steps), "base": plan["base"]["path"]}
    except (ValueError, KeyError, TypeError) as err:
        raise BadInput(f"{path / layout.CHAIN_RECORD}: not a readable chain record "
                       f"({err})") from err
    final = checkpoint_lineage(steps[-1]["checkpoint"]["path"]) if steps else None
    return summary, final


def lineage_text(path: str | Path) -> str:
    """The lineage of a checkpoint, run directory or chain directory, as indented text."""
    path = Path(path)
    if (path / layout.CHAIN_RECORD).exists():
        summary, final = _chain(path)
        head = (f"chain {path}: {summary['finished_steps']} of {len(summary['variations'])} "
                f"steps finished ({' -> '.join(summary['variations'])})")
        if final is None:
            return f"{head}\nbase {summary['base']}"
        return head + "\n" + "\n".join(_lines(final))
    return "\n".join(_lines(checkpoint_lineage(path)))


def lineage_record(path: str | Path) -> dict[str, Any]:
    """The same lineage as JSON-able data (``qadapt inspect PATH --json``)."""
    path = Path(path)
    if (path / layout.CHAIN_RECORD).exists():
        summary, final = _chain(path)
        return {**summary, "lineage": None if final is None else dataclasses.asdict(final)}
    return {"lineage": dataclasses.asdict(checkpoint_lineage(path))}


def is_lineage_path(path: str | Path) -> bool:
    """A chain, checkpoint or run directory (rather than a dataset)."""
    path = Path(path)
    return any((path / name).exists() for name in (layout.CHAIN_RECORD, layout.CHECKPOINT_RECORD,
                                                   layout.SUMMARY))
