"""``qadapt inspect PATH``: a dataset's report, or the lineage of a checkpoint, run or chain.

Holds:
    main -- the job's entry point (argparse; one-line usage errors, exit 2).
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence

from qadapt.checkpoint.lineage import is_lineage_path, lineage_record, lineage_text
from qadapt.data.inspection import inspect_dataset, report_text
from qadapt.errors import BadInput


class _OneLineParser(argparse.ArgumentParser):
    """argparse that reports a usage error in one line (the error, then the usage), exit 2."""

    def error(self, message: str):
        usage = " ".join(self.format_usage().split()).removeprefix("usage: ")
        self.exit(2, f"{self.prog}: {message} (usage: {usage})\n")


def main(argv: Sequence[str] | None = None) -> int:
    """``qadapt inspect PATH [--json]``."""
    parser = _OneLineParser(
        prog="qadapt inspect",
        description="Summarise a replay dataset: counts, returns, success, action ranges, "
        "provenance and checksum status; for a checkpoint, run or chain directory, print its "
        "lineage (parents and datasets by hash) as a tree.",
    )
    parser.add_argument("path", metavar="PATH",
                        help="dataset, checkpoint, run or chain directory")
    parser.add_argument("--json", action="store_true", help="print the report as one JSON object")
    args = parser.parse_args(list(sys.argv[1:] if argv is None else argv))
    if is_lineage_path(args.path):  # a checkpoint, run or chain: its lineage as a tree
        try:
            text = (json.dumps(lineage_record(args.path), sort_keys=True) if args.json
                    else lineage_text(args.path))
        except BadInput as err:
            print(f"qadapt inspect: {err}", file=sys.stderr)
            return 2
        print(text)
        return 0
    try:
        report = inspect_dataset(args.path)
    except BadInput as err:
        print(f"qadapt inspect: {err}", file=sys.stderr)
        return 2
    print(json.dumps(report, sort_keys=True) if args.json else report_text(report))
    return 0 if report["checksums_ok"] else 1
