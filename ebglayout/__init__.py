"""ebglayout: plane-cut EBG common-mode filters under routed differential pairs.

Build the exact cut from solved dimensions and the pair's path, check it,
estimate its notch and export it.  The tool draws, checks and estimates;
compliance rests on field solves, measurements, the applicable EMC standards
and the responsible engineer.
"""

__version__ = "0.1.0"

CAUTION = ("ebglayout draws, checks and estimates; compliance rests on field solves, measurements, "
           "the applicable EMC standards and the responsible engineer")
"""The one caution line every output that shows checks or estimates carries."""
