"""Option checks shared by every command, run by the error boundary before the command.

Helper of :mod:`paths.cli.app` (listed in its ``HELPERS``, not a command module).  Each
check names the option and the fix in one line
(:class:`~paths.InputError`, exit status 2): ranges typer cannot express, and
options that contradict each other (a conflicting option is refused, never ignored).
"""
from __future__ import annotations

import math

from paths.data.validation import InputError

__all__ = ["check_options"]

_SEED_MAX = 2**32 - 1
#: parameter -> (flag, smallest, largest or None) for whole-number options
_COUNTS = {"seed": ("--seed", 0, _SEED_MAX), "n_lambdas": ("--n-lambdas", 1, None),
           "chunk_rows": ("--chunk-rows", 1, None),
           "random_features": ("--random-features", 1, None), "rank": ("--rank", 1, None),
           "n_folds": ("--n-folds", 2, None), "repeats": ("--repeats", 1, None),
           "n_points": ("--n-points", 3, None), "n_train": ("--n-train", 2, None),
           "n_features": ("--n-features", 1, None), "n_test": ("--n-test", 1, None)}
_TIMEOUT_MAX = 24 * 3600.0


def _value(v):
    return getattr(v, "value", v)


def check_options(kw: dict) -> None:
    """Refuse out-of-range and conflicting options of a command (``kw``: its parameters)."""
    for key, (flag, lo, hi) in _COUNTS.items():
        v = kw.get(key)
        if isinstance(v, int) and not isinstance(v, bool) and (v < lo or (hi is not None and v > hi)):
            bound = f"at least {lo}" if hi is None else f"between {lo} and {hi}"
            raise InputError(f"{flag} must be a whole number {bound}; got {v}")
    timeout = kw.get("scheduler_timeout")
    if timeout is not None and not (math.isfinite(timeout) and 0 < timeout <= _TIMEOUT_MAX):
        raise InputError(f"--scheduler-timeout must be a number of seconds > 0 and at most "
                         f"{_TIMEOUT_MAX:.0f} (a day); got {timeout}")
    engine = _value(kw.get("engine"))
    if engine == "stream" and kw.get("scheduler") is not None:
        raise InputError("--scheduler needs --engine dask (the stream engine runs in this "
                         "process); drop --scheduler or use --engine dask")
    if engine in ("memory", "auto") and kw.get("rank") is None and kw.get("scheduler") is None:
        for key, flag in (("accurate", "--accurate"), ("chunk_rows", "--chunk-rows")):
            if kw.get(key) not in (None, False):
                raise InputError(f"{flag} applies to --engine stream or dask; the in-memory "
                                 f"engine reads everything at once: drop {flag} or add "
                                 "--engine stream")
    groups, targets = kw.get("groups"), kw.get("target")
    if groups is not None and targets is not None:
        names = [x for t in ([targets] if isinstance(targets, str) else targets)
                 for x in str(t).split(",") if x]
        if groups in names:
            raise InputError(f"--groups {groups!r} is the target; give the column of group "
                             "labels (subjects, sites, batches), not the response")
