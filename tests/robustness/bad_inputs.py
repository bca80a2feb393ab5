"""The bad-input table of the reliability suite, shared by the tests and scripts/robustness_report.

Holds:
    Workspace -- earlier outputs every row runs against: datasets, exported arrays, a run.
    build_workspace -- make them with the real jobs (``qadapt collect``, ``qadapt pretrain``).
    BadInputCase -- one row: how to prepare the bad input, the arguments, the words expected.
    CASES -- every row, by area (dataset, checkpoint, config, command line, output).
    cases_for_available_jobs -- the rows whose jobs exist in this checkout.
    run_in_process / run_in_subprocess -- ``qadapt ARGS...`` with exit status and output.
    try_case -- prepare a row, run it, check it: exit 2, one line naming the file or key, no
        traceback, every earlier file byte-for-byte unchanged, no pickle ever loaded.
    tree_digests -- SHA-256 of every file under a folder, by relative path.
    PickleTrap -- an object whose unpickling creates a marker file.

Rows for jobs still being written (``evaluate``, ``chain``) are added to CASES with
``job="evaluate"`` (or ``"chain"``); ``cases_for_available_jobs`` leaves them out until
``qadapt.cli.JOBS`` lists the job.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import os
import pickle
import shutil
import subprocess
import sys
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from safetensors.numpy import load_file, save_file

REPO = Path(__file__).resolve().parents[2]
HYDRA_JOBS = {"collect", "import", "split", "pretrain", "finetune", "evaluate", "chain",
              "score"}
MARKER_NAME = "unpickled.marker"

# A small network and short schedule: every checkpoint here is a few hundred KiB and a
# training run takes seconds. Shared by the workspace run, the crash trials and the tests.
SMALL_TRAINING = ("network.torso=[32,32]", "network.head=[16]", "learner.batch_size=32",
                  "maximizer.samples=16", "learner.refresh_every=10", "progress=false")


# -- running the command line ----------------------------------------------------------------
@dataclass(frozen=True)
class Outcome:
    """Exit status and captured output of one ``qadapt`` call."""

    code: int
    stdout: str
    stderr: str


def _with_run_dir(argv: list[str], hydra_dir: Path) -> list[str]:
    # Hydra's run folder goes outside every folder a row hashes.
    if argv and argv[0] in HYDRA_JOBS:
        return [*argv, f"hydra.run.dir={hydra_dir}"]
    return list(argv)


def run_in_process(argv: list[str], cwd: Path, hydra_dir: Path) -> Outcome:
    """``qadapt.cli.main(argv)`` in this process; an escaping exception counts as exit 1 with
    its traceback as stderr (what the console script would print)."""
    from qadapt.cli import main

    out, err = io.StringIO(), io.StringIO()
    previous = os.getcwd()
    os.chdir(cwd)
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(_with_run_dir(argv, hydra_dir))
            except SystemExit as stop:
                code = stop.code if isinstance(stop.code, int) else (0 if stop.code is None
                                                                       else 1)
                if isinstance(stop.code, str):
                    print(stop.code, file=sys.stderr)
            except Exception:
                traceback.print_exc()
                code = 1
    finally:
        os.chdir(previous)
    return Outcome(int(code or 0), out.getvalue(), err.getvalue())


def run_in_subprocess(argv: list[str], cwd: Path, hydra_dir: Path,
                      timeout: float = 120) -> Outcome:
    """``python -m qadapt.cli ARGS...`` in a fresh process."""
    done = subprocess.run([sys.executable, "-m", "qadapt.cli", *_with_run_dir(argv, hydra_dir)],
                          cwd=cwd, capture_output=True, text=True, timeout=timeout)
    return Outcome(done.returncode, done.stdout, done.stderr)


# -- the workspace ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Workspace:
    """Outputs of earlier jobs. Every row hashes ``root`` before and after it runs."""

    root: Path
    dataset: Path          # pick cell, scripted picker, 8 episodes (observations (61,))
    other_dataset: Path    # Pendulum-v1, random policy, 2 episodes (observations (3,))
    discrete_dataset: Path  # CartPole-v1 (a Discrete(2) action space), random policy, 2 episodes
    arrays: Path           # dataset's step arrays exported to an .npz (for ``qadapt import``)
    run: Path              # a finished pretrain run on ``dataset``
    checkpoint: Path       # run/checkpoints/last

    @property
    def best(self) -> Path:
        return self.run / "checkpoints" / "best"


def build_workspace(root: Path) -> Workspace:
    """Run the real jobs (in subprocesses, so this process keeps its torch settings)."""
    root.mkdir(parents=True, exist_ok=True)
    hydra_dir = root.parent / f"{root.name}-hydra"
    dataset, other, run = root / "pick", root / "pendulum", root / "base"
    discrete = root / "cartpole"
    steps = [
        ["collect", "policy=scripted", "episodes=8", "num_envs=8", "seed=0", f"out={dataset}",
         "progress=false"],
        ["collect", "env=gym", "env.id=Pendulum-v1", "policy=random", "episodes=2",
         "num_envs=2", "seed=0", f"out={other}", "progress=false"],
        ["collect", "env=gym", "env.id=CartPole-v1", "policy=random", "episodes=2",
         "num_envs=2", "seed=0", f"out={discrete}", "progress=false"],
        ["pretrain", f"data={dataset}", "steps=20", "eval.every=10", "eval.episodes=2",
         "checkpoint_every=10", f"out={run}", *SMALL_TRAINING],
    ]
    for argv in steps:
        done = run_in_subprocess(argv, root.parent, hydra_dir, timeout=300)
        if done.code != 0:
            raise RuntimeError(f"qadapt {' '.join(argv)} failed:\n{done.stderr}")
    arrays = root / "arrays.npz"
    names = ("observations", "actions", "rewards", "next_observations", "terminated",
             "truncated")
    np.savez(arrays, **{n: np.load(dataset / f"{n}.npy", allow_pickle=False) for n in names})
    return Workspace(root, dataset, other, discrete, arrays, run, run / "checkpoints" / "last")


def tree_digests(root: Path) -> dict[str, str]:
    """SHA-256 of every file (and a marker for every folder and symlink) under ``root``."""
    digests: dict[str, str] = {}
    if not root.exists():
        return digests
    for path in sorted(root.rglob("*")):
        key = path.relative_to(root).as_posix()
        if path.is_symlink():
            digests[key] = f"<symlink {os.readlink(path)}>"
        elif path.is_dir():
            digests[key] = "<dir>"
        else:
            digests[key] = hashlib.sha256(path.read_bytes()).hexdigest()
    return digests


# -- ways to break files ---------------------------------------------------------------------
class PickleTrap:
    """Unpickling this creates ``marker`` (``open(marker, "w")``); the marker proves a pickle
    was loaded.

    Only ever pickled here, never unpickled: ``trap_is_live`` checks the bytes.
    """

    def __init__(self, marker: Path) -> None:
        self.marker = str(marker)

    def __reduce__(self):
        return (open, (self.marker, "w"))


def trap_bytes(marker: Path) -> bytes:
    """A plain pickle of a dict holding a trap (what ``torch.save``-style files start as)."""
    return pickle.dumps({"observations": PickleTrap(marker)}, protocol=4)


def write_object_npy(path: Path, marker: Path) -> None:
    """A .npy file of dtype object (numpy stores those as a pickle after the header) whose
    elements are traps. Written by hand: numpy would need allow_pickle to write it."""
    array = np.empty(2, dtype=object)
    array[0], array[1] = PickleTrap(marker), PickleTrap(marker)
    with open(path, "wb") as handle:
        np.lib.format.write_array_header_1_0(
            handle, {"descr": "|O", "fortran_order": False, "shape": array.shape})
        pickle.dump(array, handle, protocol=3)


def trap_is_live(path: Path, marker: Path) -> bool:
    """Whether the file holds a pickle calling io.open (= builtins.open) on the marker (read
    as bytes with pickletools, never unpickled)."""
    import pickletools

    data = path.read_bytes()
    start = data.find(b"\x80")  # a pickle starts with its PROTO opcode (after any header)
    if start < 0:
        return False
    try:
        ops = [(op.name, arg) for op, arg, _ in pickletools.genops(data[start:])]
    except ValueError:
        return False
    strings = [arg for name, arg in ops if name in ("SHORT_BINUNICODE", "BINUNICODE")]
    strings += [part for name, arg in ops if name == "GLOBAL" for part in arg.split()]
    return ({"io", "open", str(marker)} <= set(strings) and ("REDUCE", None) in ops)


def copy_tree(source: Path, target: Path) -> Path:
    shutil.copytree(source, target, symlinks=True)
    return target


def flip_bit(path: Path, offset: int) -> None:
    """Flip the lowest bit of the byte at ``offset`` (negative: from the end)."""
    data = bytearray(path.read_bytes())
    data[offset] ^= 0x01
    path.write_bytes(bytes(data))


def truncate(path: Path, remove: int) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - remove])


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def edit_manifest(dataset: Path, edit: Callable[[dict], object]) -> None:
    path = dataset / "manifest.json"
    document = json.loads(path.read_text())
    edit(document)
    path.write_text(json.dumps(document, indent=2))


def relist_field(dataset: Path, name: str) -> None:
    """Make the manifest's checksum of field ``name`` match its file again (a forged record:
    only the content checks stand in the way)."""
    def edit(document: dict) -> None:
        document["fields"][name]["sha256"] = _sha256(dataset / document["fields"][name]["file"])
    edit_manifest(dataset, edit)


def rewrite_field(dataset: Path, name: str, change: Callable[[np.ndarray], None]) -> Path:
    """Change field ``name``'s array in place (same dtype and shape) and forge its checksum."""
    path = dataset / f"{name}.npy"
    array = np.load(path, allow_pickle=False).copy()
    change(array)
    np.save(path, array, allow_pickle=False)
    relist_field(dataset, name)
    return path


def edit_checkpoint(checkpoint: Path, edit: Callable[[dict], object]) -> None:
    path = checkpoint / "checkpoint.json"
    document = json.loads(path.read_text())
    edit(document)
    path.write_text(json.dumps(document, indent=2, sort_keys=True))


def relist_checkpoint_file(checkpoint: Path, name: str) -> None:
    """Forge checkpoint.json's size and SHA-256 of ``name`` to match the file now there."""
    def edit(document: dict) -> None:
        document["files"][name] = {"sha256": _sha256(checkpoint / name),
                                   "size_bytes": (checkpoint / name).stat().st_size}
    edit_checkpoint(checkpoint, edit)


def run_copy(ws: Workspace, scratch: Path) -> tuple[Path, Path]:
    """A copy of the workspace run whose summary.json points at its own checkpoint."""
    run = copy_tree(ws.run, scratch / "run")
    summary = json.loads((run / "summary.json").read_text())
    selected = Path(summary["checkpoint"]).name
    summary["checkpoint"] = str(run / "checkpoints" / selected)
    (run / "summary.json").write_text(json.dumps(summary, indent=2, sort_keys=True))
    return run, run / "checkpoints" / selected


# -- the table -------------------------------------------------------------------------------
class NotApplicable(Exception):
    """A row that cannot be set up on this machine (the reason is reported, not a failure)."""


Prepared = tuple[list[str], list[str]]


@dataclass(frozen=True)
class BadInputCase:
    """One bad input.

    ``prepare(ws, scratch)`` builds the bad files in ``scratch`` and returns the arguments and
    the strings the one-line message must contain. ``scratch / "out"`` is the output path rows
    give; it must not exist afterwards. ``trap``: the row plants a pickle whose loading would
    create ``scratch / MARKER_NAME``. ``subprocess``: run it as a real process in the tests.
    """

    name: str
    area: str
    job: str
    prepare: Callable[[Workspace, Path], Prepared]
    trap: bool = False
    subprocess: bool = False


CASES: list[BadInputCase] = []


def case(area: str, job: str, *, trap: bool = False, subprocess: bool = False):
    """Register the decorated prepare function as a row named after its docstring."""
    def register(prepare: Callable[[Workspace, Path], Prepared]):
        name = (prepare.__doc__ or prepare.__name__).strip().splitlines()[0]
        if any(c.name == name for c in CASES):
            raise ValueError(f"two rows are named {name!r}")
        CASES.append(BadInputCase(name, area, job, prepare, trap, subprocess))
        return prepare
    return register


def _finetune(ws: Workspace, scratch: Path, base: Path | str, new: Path | str | None = None,
              *extra: str) -> list[str]:
    return ["finetune", f"base={base}", f"prior={ws.dataset}", f"new={new or ws.dataset}",
            "steps=5", f"out={scratch / 'out'}", *extra]


def _pretrain(data: Path | str, scratch: Path, *extra: str) -> list[str]:
    return ["pretrain", f"data={data}", "steps=5", "eval.every=0", f"out={scratch / 'out'}",
            *SMALL_TRAINING, *extra]


# Datasets ------------------------------------------------------------------------------------
@case("dataset", "pretrain")
def _truncated_array(ws, scratch):
    """truncated observations.npy"""
    data = copy_tree(ws.dataset, scratch / "data")
    truncate(data / "observations.npy", 100)
    return _pretrain(data, scratch), [str(data / "observations.npy")]


@case("dataset", "pretrain")
def _flipped_array_data(ws, scratch):
    """bit flipped in the data of rewards.npy"""
    data = copy_tree(ws.dataset, scratch / "data")
    flip_bit(data / "rewards.npy", -3)
    return _pretrain(data, scratch), [str(data / "rewards.npy"), "checksum"]


@case("dataset", "split")
def _flipped_array_header(ws, scratch):
    """bit flipped in the header of actions.npy"""
    data = copy_tree(ws.dataset, scratch / "data")
    flip_bit(data / "actions.npy", 20)  # inside the header's dict text
    return (["split", f"source={data}", f"out_train={scratch / 'out'}",
             f"out_held_out={scratch / 'out2'}"], [str(data / "actions.npy")])


@case("dataset", "pretrain")
def _nan_observation(ws, scratch):
    """NaN in observations.npy (checksum forged to match)"""
    data = copy_tree(ws.dataset, scratch / "data")
    rewrite_field(data, "observations", lambda a: a.__setitem__((3, 2), np.nan))
    return _pretrain(data, scratch), [str(data / "observations.npy"), "NaN"]


@case("dataset", "split")
def _inf_reward(ws, scratch):
    """infinite reward in rewards.npy (checksum forged to match)"""
    data = copy_tree(ws.dataset, scratch / "data")
    rewrite_field(data, "rewards", lambda a: a.__setitem__(5, np.inf))
    return (["split", f"source={data}", f"out_train={scratch / 'out'}",
             f"out_held_out={scratch / 'out2'}"], [str(data / "rewards.npy"), "rewards"])


@case("dataset", "pretrain")
def _action_out_of_bounds(ws, scratch):
    """action outside the declared bounds (checksum forged to match)"""
    data = copy_tree(ws.dataset, scratch / "data")
    rewrite_field(data, "actions", lambda a: a.__setitem__((4, 1), 7.5))
    return _pretrain(data, scratch), [str(data / "actions.npy"), "7.5"]


@case("dataset", "inspect")
def _manifest_names_parent_file(ws, scratch):
    """manifest names a file outside its directory (../)"""
    data = copy_tree(ws.dataset, scratch / "data")
    shutil.copy(data / "rewards.npy", scratch / "rewards.npy")
    edit_manifest(data, lambda d: d["fields"]["rewards"].__setitem__("file", "../rewards.npy"))
    return ["inspect", str(data)], ["fields.rewards.file", "../rewards.npy"]


@case("dataset", "pretrain")
def _manifest_names_absolute_file(ws, scratch):
    """manifest names an absolute path"""
    data = copy_tree(ws.dataset, scratch / "data")
    target = str(ws.dataset / "rewards.npy")
    edit_manifest(data, lambda d: d["fields"]["rewards"].__setitem__("file", target))
    return _pretrain(data, scratch), ["fields.rewards.file", target]


@case("dataset", "pretrain")
def _symlink_leaves_dataset(ws, scratch):
    """array file is a symlink leaving the dataset directory"""
    data = copy_tree(ws.dataset, scratch / "data")
    (data / "rewards.npy").unlink()
    os.symlink(ws.dataset / "rewards.npy", data / "rewards.npy")
    return _pretrain(data, scratch), ["fields.rewards.file", "outside"]


@case("dataset", "pretrain")
def _dataset_format_version(ws, scratch):
    """unknown dataset format_version"""
    data = copy_tree(ws.dataset, scratch / "data")
    edit_manifest(data, lambda d: d.__setitem__("format_version", 7))
    return _pretrain(data, scratch), [str(data), "format_version", "7"]


@case("dataset", "inspect")
def _manifest_not_json(ws, scratch):
    """manifest.json is not JSON"""
    data = copy_tree(ws.dataset, scratch / "data")
    (data / "manifest.json").write_text('{"format": "qadapt replay dataset", ')
    return ["inspect", str(data)], [str(data / "manifest.json")]


@case("dataset", "split")
def _manifest_unknown_key(ws, scratch):
    """manifest with a key the format does not have"""
    data = copy_tree(ws.dataset, scratch / "data")
    edit_manifest(data, lambda d: d.__setitem__("comment", "hand-edited"))
    return (["split", f"source={data}", f"out_train={scratch / 'out'}",
             f"out_held_out={scratch / 'out2'}"], [str(data), "comment"])


@case("dataset", "pretrain")
def _manifest_wrong_type(ws, scratch):
    """manifest transition_count of the wrong type"""
    data = copy_tree(ws.dataset, scratch / "data")
    edit_manifest(data, lambda d: d.__setitem__("transition_count", "many"))
    return _pretrain(data, scratch), [str(data), "transition_count"]


@case("dataset", "pretrain", trap=True)
def _pickle_as_npy(ws, scratch):
    """pickle renamed to observations.npy"""
    data = copy_tree(ws.dataset, scratch / "data")
    (data / "observations.npy").write_bytes(trap_bytes(scratch / MARKER_NAME))
    relist_field(data, "observations")
    return _pretrain(data, scratch), [str(data / "observations.npy")]


@case("dataset", "finetune", trap=True)
def _object_npy(ws, scratch):
    """object array (a pickle after a .npy header) as rewards.npy"""
    data = copy_tree(ws.dataset, scratch / "data")
    write_object_npy(data / "rewards.npy", scratch / MARKER_NAME)
    relist_field(data, "rewards")
    return _finetune(ws, scratch, ws.checkpoint, data), [str(data / "rewards.npy")]


@case("dataset", "pretrain")
def _stray_npy(ws, scratch):
    """stray .npy file the manifest does not list"""
    data = copy_tree(ws.dataset, scratch / "data")
    shutil.copy(data / "rewards.npy", data / "bonus.npy")
    return _pretrain(data, scratch), [str(data), "bonus.npy"]


@case("dataset", "pretrain")
def _missing_array(ws, scratch):
    """array file listed in the manifest is missing"""
    data = copy_tree(ws.dataset, scratch / "data")
    (data / "terminated.npy").unlink()
    return _pretrain(data, scratch), [str(data / "terminated.npy")]


@case("dataset", "pretrain")
def _mismatched_dataset_spaces(ws, scratch):
    """two datasets with different spaces in one run"""
    return (_pretrain(f"[{ws.dataset},{ws.other_dataset}]", scratch),
            [str(ws.other_dataset), "(3,)", "(61,)"])


@case("dataset", "import")
def _import_inf_observation(ws, scratch):
    """import: infinite observation in an .npz"""
    with np.load(ws.arrays, allow_pickle=False) as archive:
        arrays = dict(archive.items())
    arrays["observations"][2, 0] = np.inf
    source = scratch / "inf.npz"
    np.savez(source, **arrays)
    return ["import", f"source={source}", f"out={scratch / 'out'}"], [str(source),
                                                                       "observations"]


@case("dataset", "import")
def _import_action_out_of_bounds(ws, scratch):
    """import: action outside the pick cell's bounds"""
    with np.load(ws.arrays, allow_pickle=False) as archive:
        arrays = dict(archive.items())
    arrays["actions"][0, 0] = -3.0
    source = scratch / "wide.npz"
    np.savez(source, **arrays)
    return ["import", f"source={source}", f"out={scratch / 'out'}"], [str(source), "actions"]


@case("dataset", "import", trap=True)
def _import_pickle_npy(ws, scratch):
    """import: pickle renamed to rewards.npy in a folder of arrays"""
    source = scratch / "arrays"
    source.mkdir()
    with np.load(ws.arrays, allow_pickle=False) as archive:
        for name, array in archive.items():
            np.save(source / f"{name}.npy", array, allow_pickle=False)
    (source / "rewards.npy").write_bytes(trap_bytes(scratch / MARKER_NAME))
    return (["import", f"source={source}", f"out={scratch / 'out'}"],
            [str(source / "rewards.npy")])


@case("dataset", "import")
def _import_truncated_npz(ws, scratch):
    """import: truncated .npz archive"""
    source = scratch / "cut.npz"
    shutil.copy(ws.arrays, source)
    truncate(source, 200)
    return ["import", f"source={source}", f"out={scratch / 'out'}"], [str(source)]


@case("dataset", "import")
def _import_flipped_npz_member(ws, scratch):
    """import: bit flipped inside an .npz member (CRC)"""
    import zipfile

    source = scratch / "flipped.npz"
    shutil.copy(ws.arrays, source)
    with zipfile.ZipFile(source) as archive:
        member = archive.getinfo("rewards.npy")
    # np.savez stores members uncompressed: the member's bytes sit after its local header.
    header = 30 + len(member.filename) + len(member.extra)
    flip_bit(source, member.header_offset + header + member.file_size - 2)
    return ["import", f"source={source}", f"out={scratch / 'out'}"], [str(source), "rewards"]


# Checkpoints ---------------------------------------------------------------------------------
@case("checkpoint", "finetune")
def _truncated_weights(ws, scratch):
    """truncated weights.safetensors"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    truncate(ckpt / "weights.safetensors", 64)
    return _finetune(ws, scratch, ckpt), [str(ckpt / "weights.safetensors")]


@case("checkpoint", "finetune")
def _flipped_weights(ws, scratch):
    """bit flipped in weights.safetensors"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    flip_bit(ckpt / "weights.safetensors", -5)
    return _finetune(ws, scratch, ckpt), [str(ckpt / "weights.safetensors"), "SHA-256"]


@case("checkpoint", "collect")
def _flipped_weights_forged(ws, scratch):
    """bit flipped in the safetensors header, checksum forged"""
    ckpt = copy_tree(ws.best, scratch / "ckpt")
    flip_bit(ckpt / "weights.safetensors", 10)  # inside the JSON header
    relist_checkpoint_file(ckpt, "weights.safetensors")
    return (["collect", "policy=checkpoint", f"policy.checkpoint={ckpt}", "episodes=2",
             f"out={scratch / 'out'}"], [str(ckpt)])


@case("checkpoint", "finetune", trap=True, subprocess=True)
def _pickle_as_weights(ws, scratch):
    """pickle renamed to weights.safetensors, checksum forged"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    (ckpt / "weights.safetensors").write_bytes(trap_bytes(scratch / MARKER_NAME))
    relist_checkpoint_file(ckpt, "weights.safetensors")
    return _finetune(ws, scratch, ckpt), [str(ckpt / "weights.safetensors"), "safetensors"]


@case("checkpoint", "pretrain", trap=True)
def _pickle_as_resume_state(ws, scratch):
    """pickle as the training state a rerun would resume from"""
    run, _ = run_copy(ws, scratch)
    last = run / "checkpoints" / "last"
    (last / "training_state.safetensors").write_bytes(trap_bytes(scratch / MARKER_NAME))
    relist_checkpoint_file(last, "training_state.safetensors")
    # The workspace run's own command, pointed at the copy: a resume.
    argv = ["pretrain", f"data={ws.dataset}", "steps=20", "eval.every=10", "eval.episodes=2",
            "checkpoint_every=10", f"out={run}", *SMALL_TRAINING]
    return argv, [str(last / "training_state.safetensors")]


@case("checkpoint", "finetune")
def _checkpoint_format_version(ws, scratch):
    """unknown checkpoint format_version"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    edit_checkpoint(ckpt, lambda d: d.__setitem__("format_version", 2))
    return _finetune(ws, scratch, ckpt), [str(ckpt / "checkpoint.json"), "format version 2"]


@case("checkpoint", "finetune")
def _checkpoint_schema_negative_step(ws, scratch):
    """checkpoint.json gradient_step negative (schema)"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    edit_checkpoint(ckpt, lambda d: d.__setitem__("gradient_step", -4))
    return _finetune(ws, scratch, ckpt), [str(ckpt / "checkpoint.json"), "gradient_step"]


@case("checkpoint", "collect")
def _checkpoint_schema_missing_key(ws, scratch):
    """checkpoint.json without its network (schema)"""
    ckpt = copy_tree(ws.best, scratch / "ckpt")
    edit_checkpoint(ckpt, lambda d: d.pop("network"))
    return (["collect", "policy=checkpoint", f"policy.checkpoint={ckpt}", "episodes=2",
             f"out={scratch / 'out'}"], [str(ckpt / "checkpoint.json"), "network"])


@case("checkpoint", "finetune")
def _checkpoint_nan_token(ws, scratch):
    """checkpoint.json with a NaN token"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    path = ckpt / "checkpoint.json"
    path.write_text(path.read_text().replace('"extra": {', '"extra": {"loss": NaN, ', 1))
    return _finetune(ws, scratch, ckpt), [str(path)]


@case("checkpoint", "finetune")
def _checkpoint_extra_file(ws, scratch):
    """unlisted file inside a checkpoint"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    (ckpt / "notes.txt").write_text("tuned by hand\n")
    return _finetune(ws, scratch, ckpt), [str(ckpt), "notes.txt"]


@case("checkpoint", "finetune")
def _checkpoint_vs_dataset_spaces(ws, scratch):
    """base checkpoint trained for other spaces than the new data"""
    argv = ["finetune", f"base={ws.checkpoint}", f"new={ws.other_dataset}", "share=1",
            "steps=5", f"out={scratch / 'out'}"]
    return argv, [str(ws.checkpoint), "(61,)", "(3,)"]


@case("checkpoint", "collect")
def _checkpoint_vs_env_spaces(ws, scratch):
    """checkpoint policy in an env with other spaces"""
    return (["collect", "env=gym", "env.id=Pendulum-v1", "policy=checkpoint",
             f"policy.checkpoint={ws.best}", "episodes=2", f"out={scratch / 'out'}"],
            [str(ws.best), "(61,)", "(3,)"])


@case("checkpoint", "finetune")
def _missing_parent(ws, scratch):
    """missing parent checkpoint"""
    return _finetune(ws, scratch, scratch / "no-such-base"), ["base", "no-such-base"]


@case("checkpoint", "finetune")
def _run_names_missing_checkpoint(ws, scratch):
    """run directory whose summary names a deleted checkpoint"""
    run, selected = run_copy(ws, scratch)
    shutil.rmtree(selected)
    return _finetune(ws, scratch, run), [str(selected)]


@case("checkpoint", "finetune")
def _run_summary_not_json(ws, scratch):
    """run directory with a broken summary.json"""
    run, selected = run_copy(ws, scratch)
    (run / "summary.json").write_text("{ half a summary")
    return _finetune(ws, scratch, run), ["base", str(run / "summary.json")]


@case("checkpoint", "finetune")
def _run_summary_checkpoint_not_a_path(ws, scratch):
    """run directory whose summary.json names its checkpoint with a number"""
    run, _ = run_copy(ws, scratch)
    (run / "summary.json").write_text(json.dumps({"selected": "best", "checkpoint": 5}))
    return _finetune(ws, scratch, run), ["base", "summary.json", '"checkpoint" is 5']


@case("checkpoint", "evaluate")
def _run_summary_a_list(ws, scratch):
    """run directory whose summary.json holds a list"""
    run, _ = run_copy(ws, scratch)
    (run / "summary.json").write_text("[1, 2]")
    return (["evaluate", f"ckpt={run}", "episodes=2", f"out={scratch / 'out'}"],
            ["ckpt", "summary.json", "list"])


@case("checkpoint", "evaluate")
def _checkpoint_weights_nan(ws, scratch):
    """checkpoint whose weights hold NaN (fingerprints forged to match)"""
    ckpt = copy_tree(ws.best, scratch / "ckpt")
    tensors = load_file(str(ckpt / "weights.safetensors"))
    name = sorted(tensors)[0]
    tensors[name] = tensors[name].copy()
    tensors[name].flat[0] = np.nan
    save_file(tensors, str(ckpt / "weights.safetensors"))
    relist_checkpoint_file(ckpt, "weights.safetensors")
    return (["evaluate", f"ckpt={ckpt}", "episodes=2", f"out={scratch / 'out'}"],
            [name, "NaN"])


@case("checkpoint", "finetune")
def _dataset_as_base(ws, scratch):
    """a dataset given as the base checkpoint"""
    return _finetune(ws, scratch, ws.dataset), ["base", str(ws.dataset)]


@case("checkpoint", "finetune")
def _symlink_in_checkpoint(ws, scratch):
    """symlink in place of weights.safetensors"""
    ckpt = copy_tree(ws.checkpoint, scratch / "ckpt")
    (ckpt / "weights.safetensors").unlink()
    os.symlink(ws.checkpoint / "weights.safetensors", ckpt / "weights.safetensors")
    return _finetune(ws, scratch, ckpt), [str(ckpt / "weights.safetensors"), "symlink"]


# Offline scoring -----------------------------------------------------------------------------
def _score(ws: Workspace, scratch: Path, data: Path, *extra: str) -> list[str]:
    return ["score", f"ckpt={ws.run}", f"data={data}", "fit.fits=2", "fit.steps_per_fit=2",
            f"out={scratch / 'out'}", *extra]


@case("dataset", "score")
def _held_out_other_spaces(ws, scratch):
    """score on a held-out dataset from another env's spaces"""
    return _score(ws, scratch, ws.other_dataset), ["held-out dataset", "(3,)", "(61,)"]


@case("dataset", "score", subprocess=True)
def _held_out_is_training_data(ws, scratch):
    """score on held-out data whose episodes trained the checkpoint"""
    return _score(ws, scratch, ws.dataset), ["data", "also trained", "allow_overlap"]


@case("config", "score")
def _score_no_fits(ws, scratch):
    """score with zero fitted Q evaluation refreshes"""
    return _score(ws, scratch, ws.dataset, "fit.fits=0"), ["fit.fits", "positive integer"]


@case("output", "score")
def _score_into_users_folder(ws, scratch):
    """score into a folder holding the user's own files"""
    mine = scratch / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("mine\n")
    argv = [a for a in _score(ws, scratch, ws.dataset, "allow_overlap=true")
            if not a.startswith("out=")] + [f"out={mine}"]
    return argv, ["out", str(mine), "not a score"]


# Configs -------------------------------------------------------------------------------------
@case("config", "pretrain")
def _shares_over_one(ws, scratch):
    """shares that do not sum to 1"""
    return (_pretrain(f"[{ws.dataset},{ws.dataset}]", scratch, "shares=[0.7,0.7]"),
            ["share", "0.7"])


@case("config", "pretrain")
def _shares_wrong_count(ws, scratch):
    """one share for two datasets"""
    return _pretrain(f"[{ws.dataset},{ws.dataset}]", scratch, "shares=[1.0]"), ["share"]


@case("config", "pretrain")
def _negative_share(ws, scratch):
    """negative share"""
    return (_pretrain(f"[{ws.dataset},{ws.dataset}]", scratch, "shares=[1.5,-0.5]"),
            ["share", "-0.5"])


@case("config", "pretrain", subprocess=True)
def _negative_steps(ws, scratch):
    """negative steps"""
    return _pretrain(ws.dataset, scratch, "steps=-3"), ["steps", "-3"]


@case("config", "finetune")
def _negative_finetune_steps(ws, scratch):
    """negative finetune steps"""
    return _finetune(ws, scratch, ws.checkpoint, None, "steps=-1"), ["steps", "-1"]


@case("config", "finetune")
def _shrink_factor_over_one(ws, scratch):
    """shrink-and-perturb factor above 1"""
    return (_finetune(ws, scratch, ws.checkpoint, None, "init=shrink_perturb",
                      "init.shrink.factor=1.5"), ["init.shrink.factor", "1.5"])


@case("config", "pretrain")
def _negative_checkpoint_every(ws, scratch):
    """negative checkpoint_every"""
    return _pretrain(ws.dataset, scratch, "checkpoint_every=-10"), ["checkpoint_every", "-10"]


@case("config", "finetune")
def _finetune_share_zero(ws, scratch):
    """finetune share of 0"""
    return _finetune(ws, scratch, ws.checkpoint, None, "share=0"), ["share", "0"]


@case("config", "pretrain")
def _unknown_group_option(ws, scratch):
    """unknown config group option network=giant"""
    return _pretrain(ws.dataset, scratch, "network=giant"), ["network", "giant"]


@case("config", "finetune")
def _unknown_learner_option(ws, scratch):
    """unknown config group option learner=turbo"""
    return _finetune(ws, scratch, ws.checkpoint, None, "learner=turbo"), ["learner", "turbo"]


@case("config", "pretrain")
def _unknown_key(ws, scratch):
    """misspelt key"""
    return _pretrain(ws.dataset, scratch, "stepz=3"), ["stepz"]


@case("config", "pretrain")
def _wrong_type(ws, scratch):
    """seed that is not a number"""
    return _pretrain(ws.dataset, scratch, "seed=abc"), ["seed", "abc"]


@case("config", "pretrain")
def _bad_learner_value(ws, scratch):
    """learner batch size of 0"""
    return _pretrain(ws.dataset, scratch, "learner.batch_size=0"), ["batch_size", "0"]


@case("config", "collect")
def _target_key(ws, scratch):
    """Hydra _target_ added to the policy"""
    return (["collect", "+policy._target_=os.system", "episodes=2", f"out={scratch / 'out'}"],
            ["_target_"])


@case("config", "pretrain")
def _missing_data(ws, scratch):
    """dataset path that does not exist"""
    return _pretrain(scratch / "nowhere", scratch), ["data", str(scratch / "nowhere")]


# Command line --------------------------------------------------------------------------------
@case("command line", "-", subprocess=True)
def _unknown_job(ws, scratch):
    """unknown job"""
    return ["retrain", f"data={ws.dataset}"], ["retrain"]


@case("command line", "inspect")
def _inspect_without_path(ws, scratch):
    """inspect without a path"""
    return ["inspect"], ["PATH"]


@case("command line", "inspect")
def _inspect_unknown_flag(ws, scratch):
    """inspect with an unknown flag"""
    return ["inspect", str(ws.dataset), "--colour"], ["--colour"]


@case("command line", "pretrain")
def _bare_word(ws, scratch):
    """an argument that is not key=value"""
    return ["pretrain", f"data={ws.dataset}", "quickly", f"out={scratch / 'out'}"], ["quickly"]


@case("command line", "split")
def _split_onto_itself(ws, scratch):
    """split with both parts at one path"""
    return (["split", f"source={ws.dataset}", f"out_train={scratch / 'out'}",
             f"out_held_out={scratch / 'out'}"], [str(scratch / "out")])


# Outputs -------------------------------------------------------------------------------------
@case("output", "collect", subprocess=True)
def _output_parent_is_file(ws, scratch):
    """output path whose parent is a regular file"""
    blocker = scratch / "blocker"
    blocker.write_text("a file, not a folder\n")
    return (["collect", "policy=random", "episodes=2", "num_envs=2",
             f"out={blocker / 'out'}", "progress=false"], ["out", str(blocker)])


@case("output", "pretrain")
def _pretrain_output_parent_is_file(ws, scratch):
    """pretrain output under a regular file"""
    blocker = scratch / "blocker"
    blocker.write_text("a file, not a folder\n")
    argv = _pretrain(ws.dataset, scratch)
    argv = [a for a in argv if not a.startswith("out=")] + [f"out={blocker / 'run'}"]
    return argv, ["out", str(blocker)]


@case("output", "split")
def _read_only_directory(ws, scratch):
    """output inside a directory this user cannot write"""
    locked = scratch / "locked"
    locked.mkdir()
    os.chmod(locked, 0o555)
    probe = locked / ".probe"
    try:
        probe.write_text("")
    except OSError:
        pass  # the permission holds: the row applies
    else:
        probe.unlink()
        os.chmod(locked, 0o755)
        raise NotApplicable("running as root: file permissions do not stop writes (the "
                            "rows with an output under a regular file cover this)")
    return (["split", f"source={ws.dataset}", f"out_train={locked / 'train'}",
             f"out_held_out={locked / 'held'}"], [str(locked)])


@case("output", "collect")
def _collect_onto_dataset(ws, scratch):
    """collect onto an existing dataset"""
    return (["collect", "policy=random", "episodes=2", "num_envs=2", f"out={ws.dataset}",
             "progress=false"], [str(ws.dataset)])


@case("output", "pretrain")
def _resume_other_config(ws, scratch):
    """rerun into a run directory made by another configuration"""
    run, _ = run_copy(ws, scratch)
    argv = ["pretrain", f"data={ws.dataset}", "steps=20", "eval.every=10", "eval.episodes=2",
            "checkpoint_every=10", f"out={run}", *SMALL_TRAINING, "seed=9"]
    return argv, [str(run / "checkpoints" / "last"), "different configuration"]


@case("output", "collect")
def _collect_onto_non_dataset(ws, scratch):
    """collect onto a folder that holds other files"""
    folder = scratch / "photos"
    folder.mkdir()
    (folder / "cell.txt").write_text("not a dataset\n")
    return (["collect", "policy=random", "episodes=2", "num_envs=2", f"out={folder}",
             "progress=false"], [str(folder)])


# Evaluate ------------------------------------------------------------------------------------
@case("checkpoint", "evaluate")
def _evaluate_truncated_weights(ws, scratch):
    """evaluate: truncated weights.safetensors"""
    ckpt = copy_tree(ws.best, scratch / "ckpt")
    truncate(ckpt / "weights.safetensors", 64)
    return (["evaluate", f"ckpt={ckpt}", "episodes=2", f"out={scratch / 'out'}"],
            [str(ckpt / "weights.safetensors")])


@case("checkpoint", "evaluate")
def _evaluate_other_spaces(ws, scratch):
    """evaluate: checkpoint in an env with other spaces"""
    return (["evaluate", f"ckpt={ws.best}", "env=gym", "env.id=Pendulum-v1", "episodes=2",
             f"out={scratch / 'out'}"], [str(ws.best), "(61,)", "(3,)"])


@case("config", "evaluate")
def _evaluate_unknown_variation(ws, scratch):
    """evaluate: unknown variation in the list"""
    return (["evaluate", f"ckpt={ws.best}", "variations=[none,sideways]", "episodes=2",
             f"out={scratch / 'out'}"], ["variations", "sideways"])


@case("config", "evaluate")
def _evaluate_zero_episodes(ws, scratch):
    """evaluate: zero episodes"""
    return (["evaluate", f"ckpt={ws.best}", "episodes=0", f"out={scratch / 'out'}"],
            ["episodes", "0"])


@case("output", "evaluate")
def _evaluate_output_parent_is_file(ws, scratch):
    """evaluate: output under a regular file"""
    blocker = scratch / "blocker"
    blocker.write_text("a file, not a folder\n")
    return (["evaluate", f"ckpt={ws.best}", "episodes=2", f"out={blocker / 'out'}"],
            [str(blocker)])


# Environments --------------------------------------------------------------------------------
@case("config", "collect")
def _collect_misspelt_env(ws, scratch):
    """collect: an env id that is not registered (close matches named)"""
    return (["collect", "env=gym", "env.id=Pendulm-v1", "policy=random", "episodes=2",
             f"out={scratch / 'out'}", "progress=false"], ["Pendulm-v1", "Pendulum-v1"])


@case("config", "collect")
def _collect_perturbation_on_other_env(ws, scratch):
    """collect: a pick-cell variation on an env whose constructor takes no perturbations"""
    return (["collect", "env=gym", "env.id=Pendulum-v1", "variation=finger_offset",
             "policy=random", "episodes=2", f"out={scratch / 'out'}", "progress=false"],
            ["Pendulum-v1", "perturbations", "variation.wrappers"])


@case("output", "pretrain")
def _pretrain_into_a_users_folder(ws, scratch):
    """pretrain: out= is a folder holding a file that is not a run's"""
    folder = scratch / "mine"
    folder.mkdir()
    (folder / "notes.txt").write_text("my notes\n")
    return (["pretrain", f"data={ws.dataset}", "steps=5", "eval.every=0", f"out={folder}",
             *SMALL_TRAINING], [str(folder), "notes.txt", "not a qadapt run"])


# Action spaces and value heads (gymnasium's CartPole-v1 has a Discrete(2) action space,
# Pendulum-v1 a Box and rewards in [-16.3, 0], per their documentation) ---------------------
@case("config", "pretrain")
def _pretrain_cem_on_discrete(ws, scratch):
    """pretrain: maximizer=cem on a Discrete action space"""
    return _pretrain(ws.discrete_dataset, scratch, "maximizer=cem"), ["cem", "Discrete"]


@case("config", "pretrain")
def _pretrain_exhaustive_on_box(ws, scratch):
    """pretrain: maximizer=exhaustive on a Box action space"""
    return _pretrain(ws.other_dataset, scratch, "maximizer=exhaustive"), ["exhaustive", "Box"]


@case("config", "pretrain")
def _pretrain_per_action_on_box(ws, scratch):
    """pretrain: the one-output-per-choice network on a Box action space"""
    return _pretrain(ws.other_dataset, scratch, "network=per_action"), ["per_action", "Box"]


@case("config", "pretrain")
def _pretrain_sigmoid_on_negative_rewards(ws, scratch):
    """pretrain: a sigmoid output forced on rewards outside [0, 1]"""
    return (_pretrain(ws.other_dataset, scratch, "network.output=sigmoid"),
            ["network.output", "sigmoid", "[0, 1]"])


@case("config", "finetune")
def _finetune_loss_against_base_head(ws, scratch):
    """finetune: a loss override that conflicts with the base's sigmoid output"""
    return (_finetune(ws, scratch, ws.best, None, "learner.loss=mse"),
            ["learner.loss", "sigmoid", "base checkpoint"])


# Chain ---------------------------------------------------------------------------------------
def _chain(ws: Workspace, scratch: Path, *extra: str) -> list[str]:
    return ["chain", f"base={ws.best}", f"prior={ws.dataset}", "variations=[finger_offset]",
            "episodes=2", "steps=5", "eval_episodes=2", f"out={scratch / 'out'}", *extra]


@case("config", "chain")
def _chain_unknown_variation(ws, scratch):
    """chain: unknown variation in the list"""
    return _chain(ws, scratch, "variations=[finger_offset,sideways]"), ["sideways"]


@case("config", "chain")
def _chain_zero_rounds(ws, scratch):
    """chain: zero rounds"""
    return _chain(ws, scratch, "rounds=0"), ["rounds", "0"]


@case("checkpoint", "chain")
def _chain_base_not_a_checkpoint(ws, scratch):
    """chain: base is a folder that is neither a checkpoint nor a run"""
    folder = scratch / "empty"
    folder.mkdir()
    return _chain(ws, scratch, f"base={folder}"), [str(folder)]


@case("config", "chain")
def _chain_unknown_earlier_rounds(ws, scratch):
    """chain: earlier_rounds names no data side"""
    return _chain(ws, scratch, "earlier_rounds=sideways"), ["earlier_rounds", "sideways"]


# Study ---------------------------------------------------------------------------------------
def _study(scratch: Path, *extra: str) -> list[str]:
    return ["study", "grid=quick", "launcher=local", f"out={scratch / 'out'}", *extra]


@case("config", "study")
def _study_unknown_strategy(ws, scratch):
    """study: unknown strategy"""
    return _study(scratch, "strategies=[warm,sideways]"), ["strategies", "sideways"]


@case("config", "study")
def _study_unknown_variation(ws, scratch):
    """study: unknown variation"""
    return _study(scratch, "variations=[sideways]"), ["sideways"]


@case("config", "study")
def _study_zero_seeds(ws, scratch):
    """study: an empty seed list"""
    return _study(scratch, "seeds=[]"), ["seeds"]


@case("config", "study")
def _study_one_round(ws, scratch):
    """study: rounds of adaptation with a single round"""
    return _study(scratch, "rounds.count=1"), ["rounds.count"]


# -- running a row ---------------------------------------------------------------------------
@dataclass
class CaseResult:
    """What one row did; ``problems`` is empty when the input was handled cleanly."""

    case: BadInputCase
    outcome: Outcome | None = None
    problems: list[str] = field(default_factory=list)
    skipped: str | None = None

    @property
    def clean(self) -> bool:
        return self.skipped is None and not self.problems


def cases_for_available_jobs() -> list[BadInputCase]:
    """The rows whose job this checkout has (``-`` rows test the dispatcher itself)."""
    from qadapt.cli import JOBS

    return [c for c in CASES if c.job == "-" or c.job in JOBS]


def try_case(item: BadInputCase, ws: Workspace, scratch: Path, *,
             in_subprocess: bool = False) -> CaseResult:
    """Prepare ``item`` in the empty folder ``scratch``, run it, and check the outcome."""
    result = CaseResult(item)
    scratch.mkdir(parents=True, exist_ok=True)
    try:
        argv, words = item.prepare(ws, scratch)
    except NotApplicable as why:
        result.skipped = str(why)
        return result
    marker = scratch / MARKER_NAME
    before = {"workspace": tree_digests(ws.root), "scratch": tree_digests(scratch)}
    if item.trap:
        planted = [p for p in scratch.rglob("*") if p.is_file() and trap_is_live(p, marker)]
        if not planted:
            result.problems.append("the row planted no live pickle trap")
    runner = run_in_subprocess if in_subprocess else run_in_process
    hydra_dir = scratch.parent / f"{scratch.name}-hydra"
    outcome = runner(argv, scratch, hydra_dir)
    result.outcome = outcome
    lines = outcome.stderr.strip().splitlines()
    if outcome.code != 2:
        result.problems.append(f"exit status {outcome.code}, expected 2")
    if "Traceback" in outcome.stderr:
        result.problems.append("a traceback on stderr")
    if len(lines) != 1:
        result.problems.append(f"{len(lines)} lines on stderr, expected 1")
    line = lines[0] if lines else ""
    missing = [w for w in words if w not in line]
    if missing:
        result.problems.append(f"the message does not name {missing}")
    after = {"workspace": tree_digests(ws.root), "scratch": tree_digests(scratch)}
    for place in before:
        if after[place] != before[place]:
            changed = sorted(set(before[place].items()) ^ set(after[place].items()))
            result.problems.append(f"{place} changed: {[k for k, _ in changed][:4]}")
    if marker.exists():
        result.problems.append("a pickle was loaded (the trap's marker file exists)")
    return result


def describe(result: CaseResult) -> str:
    """One line for a report: status, area, name and what went wrong."""
    if result.skipped:
        return f"skip   {result.case.area:<12} {result.case.name}: {result.skipped}"
    status = "clean" if result.clean else "FAILED"
    text = f"{status:<6} {result.case.area:<12} {result.case.name}"
    if not result.clean:
        detail = result.outcome.stderr.strip().replace("\n", " | ")[-400:] if (
            result.outcome) else ""
        text += f": {'; '.join(result.problems)} [{detail}]"
    return text
