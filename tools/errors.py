"""Exit codes and the command-line error shared by every ``veer`` subcommand.

A small module of its own so that tools/cli.py and the subcommand modules import it
without importing each other.
"""

from __future__ import annotations

__all__ = ["EXIT_OK", "EXIT_NO_PATH", "EXIT_BAD_INPUT", "UsageError", "bad_input_errors", "number_flag"]

EXIT_OK = 0
"""Done: a path was found (or the command did its job)."""

EXIT_NO_PATH = 1
"""A valid request with no path (or, for ``veer demo``, a scenario not as expected)."""

EXIT_BAD_INPUT = 2
"""Bad input: a bad command line, map, vehicle file or pose; the message says which."""


class UsageError(Exception):
    """A bad command line or output path: printed as one line, exit code 2."""


def bad_input_errors() -> tuple[type[BaseException], ...]:
    """The project's bad-input errors that ``veer`` prints as one line and exits 2 on.

    Imported on call so that ``veer --help`` does not load numpy and OpenCV.
    """
    from veer.maps import MapError
    from veer.planning import PlanningError

    return (UsageError, MapError, PlanningError)


def number_flag(what: str, *, low: float = float("-inf"), high: float = float("inf"), low_open: bool = False,
                allow_inf: bool = False):
    """An argparse ``type=`` for a number flag in [low, high] (``low_open``: above ``low``).

    ``what`` names the value in the one-line error, e.g. "a number of seconds". NaN is always
    refused, an infinity unless ``allow_inf``.
    """
    import argparse
    import math

    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected {what}, got {text!r}") from None
        inside = (low < value if low_open else low <= value) and value <= high
        if math.isnan(value) or (math.isinf(value) and not allow_inf) or not inside:
            bound = f"> {low:g}" if low_open else f">= {low:g}"
            limits = f"between {low:g} and {high:g}" if math.isfinite(low) and math.isfinite(high) else bound
            raise argparse.ArgumentTypeError(f"expected {what} {limits}, got {text!r}")
        return value

    return parse
