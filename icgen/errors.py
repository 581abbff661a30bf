"""Errors raised for bad user input (model files, unit strings, API arguments)."""

import difflib
import reprlib

__all__ = ["ModelError", "MISSING", "show_value", "did_you_mean"]

# Longest value shown in a message; a model file can hold a very long string.
_MAX_SHOWN = 80
# repr of a huge table or string would cost time and memory for 80 characters: reprlib
# stops early (a few items per container, strings cut to their ends).
_REPR = reprlib.Repr()
_REPR.maxlevel, _REPR.maxstring, _REPR.maxother, _REPR.maxlong = 3, _MAX_SHOWN, _MAX_SHOWN, 40
_REPR.maxdict = _REPR.maxlist = _REPR.maxtuple = _REPR.maxset = 4


class _Missing:
    """Marker for 'no value to show' (a key that is absent, a whole-file problem)."""

    def __repr__(self):
        return "MISSING"


MISSING = _Missing()


def show_value(value):
    """Return a short one-line text for ``value`` as received from the user.

    Strings are quoted (``'5 kpc'``), other values shown with ``repr``. Never raises:
    a value whose ``repr`` fails (an integer too long to print, a too deeply nested
    list) is described instead.
    """
    try:
        text = _REPR.repr(value)
    except (ValueError, RecursionError):
        text = f"<unprintable {type(value).__name__}>"
    # repr of a str escapes newlines already; other reprs might not.
    text = " ".join(text.split())
    if len(text) > _MAX_SHOWN:
        text = text[: _MAX_SHOWN - 3] + "..."
    return text


def did_you_mean(word, options):
    """Return "did you mean 'x'?" for the option closest to ``word``, or "" if none is close.

    A match that differs only in case wins; otherwise difflib.get_close_matches decides.
    """
    if not isinstance(word, str):
        return ""
    by_lower = {option.lower(): option for option in options}
    if word.lower() in by_lower:
        return f"did you mean '{by_lower[word.lower()]}'?"
    close = difflib.get_close_matches(word, options, n=1)
    return f"did you mean '{close[0]}'?" if close else ""


class ModelError(ValueError):
    """A model-file value (or an API argument) that breaks a rule.

    The message is a single line naming the key, the value received and the rule::

        components.disk.scale_height: got '5 kpc'; must be smaller than scale_length (3 kpc)

    Parameters
    ----------
    key : str
        Dotted model-file key, e.g. ``"components.disk.scale_height"``, or a file name for
        whole-file problems.
    value : object
        The value received; ``MISSING`` when there is none to show (absent key).
    rule : str
        What was expected and, where it helps, how to fix it.
    """

    def __init__(self, key, value, rule):
        self.key = " ".join(str(key).split())
        self.value = value
        self.rule = " ".join(str(rule).split())
        if value is MISSING:
            message = f"{self.key}: {self.rule}"
        else:
            message = f"{self.key}: got {show_value(value)}; {self.rule}"
        super().__init__(message)

    def __reduce__(self):
        # Exceptions pickle through self.args (the message) by default, which would
        # not match this three-argument constructor (needed for multiprocessing).
        return (type(self), (self.key, self.value, self.rule))
