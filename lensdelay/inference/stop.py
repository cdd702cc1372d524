"""A request to stop sampling cleanly, shared by the sampler and the command line.

Kept apart (no numerical imports) so the command line can set up its signal handler
before anything heavy is loaded.
"""

from __future__ import annotations

__all__ = ["StopRequest"]


class StopRequest:
    """A request to stop sampling at the next checkpoint, owned by the caller.

    The command line makes one and sets :attr:`requested` from its signal handler;
    :func:`sample` marks :attr:`active` while it runs, so the handler knows whether to
    let the sampler stop cleanly (raising inside emcee's call of the likelihood would
    make emcee print a traceback) or to interrupt at once.
    """

    def __init__(self):
        self.active = False
        self.requested = False
