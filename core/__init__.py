"""jointwise: joint-aware posing of mechanical assemblies.

Host-independent core: joint transforms by screw theory, loop closure, sweeps.
Conventions are stated in :mod:`jointwise.spatial` (transforms, screws) and
:mod:`jointwise.mechanism` (home placement, units).
"""
from .errors import AssemblyError, JointwiseError, LimitError, SpecError
from .mechanism import Mechanism, Pose, from_dict, load, loads
from .units import __version__


__all__ = ["load", "loads", "from_dict", "Mechanism", "Pose",
           "JointwiseError", "SpecError", "AssemblyError", "LimitError", "__version__"]
