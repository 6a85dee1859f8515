"""Turn an exception raised while handling a front-end event into text for the widget's error area.

Events from the page (an edit, a drag, the Fit button) have no caller to raise to: an exception
there would end up in a log nobody reads. The widget catches it and shows this text instead.
"""

from __future__ import annotations

import traceback

from ..errors import CurvewrightError

__all__ = ["describe"]

# Enough frames to find the user's own callable in a traceback without flooding the panel.
_TRACEBACK_FRAMES = 6


def describe(exc: BaseException) -> str:
    """A message for the error area.

    Our own errors already say what is wrong and how to fix it, so they are shown as they are.
    Anything else is a bug (ours or in a user's model function): it is shown with its type and
    the last frames of its traceback so it can be reported or fixed.
    """
    if isinstance(exc, CurvewrightError):
        return str(exc)
    tb = traceback.format_exception(type(exc), exc, exc.__traceback__, limit=-_TRACEBACK_FRAMES)
    return f"Unexpected {type(exc).__name__}: {exc}\n\n" + "".join(tb).rstrip()
