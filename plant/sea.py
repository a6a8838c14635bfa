"""The sea, in one import: spectra (`plant.spectra`) and waves at the ship (`plant.waves`).

The two modules hold the code and its documentation; this module only gathers their public
names so the rest of finloop can write ``from plant.sea import Jonswap, synthesise, wave_loads``.
"""

from __future__ import annotations

from plant.spectra import *  # noqa: F403
from plant.spectra import __all__ as _spectra_all
from plant.waves import *  # noqa: F403
from plant.waves import __all__ as _waves_all

__all__ = [*_spectra_all, *_waves_all]
