"""Error types the command line turns into a one-line message and exit status 2.

Holds:
    BadInput -- the user gave something unusable (a file, a config value, an argument).
    TrainingFailed -- training stopped itself (e.g. diverged); reported in one line, exit 3.
"""

from __future__ import annotations


class BadInput(ValueError):
    """Raised for input the user can fix; the message names the file or key and the problem.

    Example:
        >>> try:
        ...     raise BadInput("data.steps: got -5, expected a positive integer")
        ... except ValueError as err:
        ...     print(err)
        data.steps: got -5, expected a positive integer
    """


class TrainingFailed(RuntimeError):
    """Training stopped itself (a divergence guard fired); earlier checkpoints stay as they were.

    The command line prints the message in one line and exits with status 3.
    """
