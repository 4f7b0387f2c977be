"""specfold: data-acquisition channel requirements in plain text, computed, checked and published.

The pipeline, one module (or package) per stage::

    load -> model -> analysis (dsp) -> rules -> report / site

Public API: :func:`load_spec`, :func:`analyze`, :func:`run_rules`, :class:`SpecError`.
"""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["SpecError", "SpecErrors", "__version__", "analyze", "load_spec", "run_rules"]

from .analysis import analyze
from .errors import SpecError, SpecErrors
from .load import load_spec
from .rules import run_rules
