"""reportgen: Bayesian correlation reports from a declarative spec.

From Python: ``reportgen.load_spec``, ``reportgen.run`` and ``reportgen.fit_pair`` (see ``reportgen.api``).
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"
__all__ = ["PairSummary", "RuleProbability", "__version__", "fit_pair", "load_spec", "run"]

_API_NAMES = frozenset({"PairSummary", "RuleProbability", "fit_pair", "load_spec", "run"})


def __getattr__(name: str) -> Any:
    # imported on first use (PEP 562), so the command line's `from reportgen import __version__` does not
    # load pandas, the sampler and the renderer before it has parsed its options
    if name in _API_NAMES:
        from reportgen import api

        return getattr(api, name)
    raise AttributeError(f"module 'reportgen' has no attribute {name!r}")
