"""Progress bars: tqdm on a terminal, a silent stand-in everywhere else.

A bar is drawn only when it is asked for (not ``--quiet``) and standard error is a
terminal, so that logs, pipes and test runs stay clean.
"""
import sys

__all__ = ["progress_enabled", "stage_bar", "NullBar"]


class NullBar:
    """Does nothing; has the part of tqdm's interface that icgen uses."""

    def update(self, n=1):
        pass

    def set_postfix_str(self, text):
        pass

    def close(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


def progress_enabled(quiet=False, stream=None):
    """True when bars should be drawn: not ``quiet`` and ``stream`` (stderr) is a terminal."""
    if quiet:
        return False
    stream = sys.stderr if stream is None else stream
    isatty = getattr(stream, "isatty", None)
    try:
        return bool(isatty and isatty())
    except ValueError:  # a closed stream
        return False


def stage_bar(desc, total, enabled, unit="it"):
    """A tqdm bar on stderr for one stage, or a :class:`NullBar` when not ``enabled``.

    Parameters
    ----------
    desc : str
        Stage name shown left of the bar (padded so stacked bars line up).
    total : int
        Number of steps (particles for a sampling stage, 1 for a one-shot stage).
    enabled : bool
        Usually :func:`progress_enabled`.
    unit : str
        Step name shown in the rate.
    """
    if not enabled:
        return NullBar()
    from tqdm import tqdm

    scale = unit.strip() != "it"
    return tqdm(total=total, desc=f"{desc:<16}", unit=unit, unit_scale=scale,
                file=sys.stderr, leave=True, dynamic_ncols=True)
