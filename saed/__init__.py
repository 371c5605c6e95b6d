"""saed: index selected-area electron diffraction (SAED) patterns.

Stages (see DEVELOPERS.md): ``physics`` -> ``crystal`` -> ``simulate`` and
``image`` -> ``index`` -> ``report`` / ``batch`` / ``cli``.
"""

__version__ = "0.1.0"
