"""Error types the command line turns into a one-line message and exit status 2.

Holds:
    BadInput -- the user gave something unusable (a file, a config value, an argument).
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
