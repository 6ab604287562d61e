"""The live page in a browser: the page's state (:class:`LiveState`, fed by the listen loop and
by loop-margin estimates) and the read-only server that shows it (:class:`LiveServer`, standard
library, server-sent events). The page's HTML, script and style ship in ``assets/``.

The names below are the public API; each is imported from its module on first use.
"""

from howl._lazy import lazy_exports

_NAMES = {
    "LiveState": "state",
    "BlockTap": "state",
    "spectrum_db": "state",
    "STATE_WORDS": "state",
    "LiveServer": "server",
    "lan_address": "server",
    "new_token": "server",
}

__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy_exports(__name__, _NAMES)
