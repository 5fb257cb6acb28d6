"""ebglayout actions for KiCad's PCB editor (pcbnew action plugins, KiCad 6 to 9).

Copy this folder into KiCad's scripting/plugins folder (or install the package
that `ebglayout kicad-package` builds through the Plugin and Content Manager).
KiCad's own Python needs ebglayout's dependencies (numpy, shapely, ezdxf, gdstk,
scipy, Pillow): see the README.  If anything is missing, the actions still
register and explain what to install instead of failing at KiCad's start-up.
"""
from __future__ import annotations

import os
import sys

_HERE = os.path.dirname(os.path.abspath(__file__))
if os.path.isdir(os.path.join(_HERE, "ebglayout")) and _HERE not in sys.path:
    sys.path.insert(0, _HERE)  # the Plugin and Content Manager package carries ebglayout beside this file

try:
    import pcbnew
except ImportError:  # imported outside KiCad (tests, packaging): nothing to register
    pcbnew = None

if pcbnew is not None and hasattr(pcbnew, "ActionPlugin"):
    from .plugin import register_all

    register_all()
