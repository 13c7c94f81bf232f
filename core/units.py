"""Constants at the bottom of the core: file format version, units, input limits, every
tolerance of the solver and the sweeps.

Nothing here imports anything of jointwise; every other module may import from here.
Tolerances are scale-free: positions are compared relative to the mechanism's size
(the largest distance between joint points), angles in radians.
"""
from __future__ import annotations

import math

#: The package's version (pyproject.toml says the same; a test compares them).
__version__ = "0.1.0"
#: Version of the mechanism file format written and read.
FORMAT = 1
#: Documented input limits (README, "Input limits").  Beyond them input is refused with
#: exit 2 before any large allocation.
LIMITS = {
    "file_bytes": 16 * 1024 * 1024,   # a mechanism file is read with this cap
    "nesting": 64,                    # levels of lists and tables
    "items": 100_000,                 # entries of one list or table
    "magnitude": 1e12,                # any number in a file (coordinates in file units)
    "steps": 100_000_000,             # samples of one sweep
    "turns": 1e4,                     # span of an angle drive in one sweep, in turns
    "sizes": 1e6,                     # span of a length drive, in mechanism sizes
}
#: Length units accepted, with their size in millimetres.
LENGTH_UNITS = {"mm": 1.0, "cm": 10.0, "m": 1000.0, "in": 25.4}
#: Angle units accepted, with their size in radians.
ANGLE_UNITS = {"deg": math.pi / 180, "rad": 1.0}

#: Home placements that miss closure by no more than this are settled by ``pose``:
#: position error up to this fraction of the mechanism's size (the largest distance
#: between joint points), angle error up to this in radians.
ASSEMBLY_TOLERANCE = 1e-3
#: Parallel turning axes of loop joints closer than this fraction of the mechanism's size
#: (or of its coordinates' magnitude, if larger) are made coaxial (drawing noise, e.g. float32 storage of a screw's bearing and nut).
COAXIAL_TOLERANCE = 1e-5

#: Converged when every loop closes within this many radians, and within ``CLOSE_POSITION``
#: of the mechanism's size in position (scale-free: results do not depend on the drawing's
#: unit or scale).  Closure errors are reported in radians, with positions weighted by
#: ``TOLERANCE / (CLOSE_POSITION * size)`` so that one number compares with ``TOLERANCE``.
TOLERANCE = 1e-9
CLOSE_POSITION = 1e-11
#: A pose is flagged singular when the smallest (generic-rank) singular value of the
#: dimensionless constraint Jacobian of the solved coordinates falls below this
#: fraction of the largest.
SINGULAR_RATIO = 1e-3
#: First continuation sub-step: predicted motion of the solved coordinates,
#: dimensionless (radian, or length / mechanism size); grows to ``MAX_MOTION``
#: while the corrector stays small.
MAX_STEP = 0.1
MAX_MOTION = 0.3
#: ... and up to this where the motion is close to linear (screws).
MAX_LINEAR_MOTION = 2 * math.pi
#: Largest sub-step of the held coordinates themselves (eight turns).
MAX_HELD_STEP = 16 * math.pi
#: A corrector that moves more than half the predicted motion plus this is a jump.
JUMP_SLACK = 0.01
MAX_ITER = 30
#: Held values farther than this from the start (dimensionless: radians, about 1600 turns,
#: or mechanism sizes) are refused rather than followed for minutes.
MAX_SPAN = 1e4
#: A continuation sub-step whose first-order prediction moves the solved coordinates at
#: least this far (dimensionless) starts its corrector from the second-order prediction
#: (the tangent's curvature from J-dot q-dot); shorter ones close in one Newton step from
#: the first-order prediction already (its error, about half the curvature times the
#: squared step, stays near or below the square root of the tolerance).
CURVE_FROM = 1e-3
#: Jacobians of this many recent closed states are kept for warm starts from them.
JACOBIAN_MEMORY = 256
#: Evaluation plans (index arrays per block and column layout) kept; oldest dropped first.
PLAN_MEMORY = 64
#: Continuation corrector: each Newton increment must be at most this fraction of the one
#: before (a Kantorovich-style contraction test, see :func:`branch_step_certified`).
CONTRACTION = 0.25
#: Newton iterations of the continuation corrector (it converges quadratically or fails;
#: linearly, ratio 1/2, only at a dead point reached exactly).
CORRECTOR_ITER = 24
#: Increments below this (dimensionless) are not tested for contraction: a branch that
#: near is the same branch at a singular point, where Newton converges linearly.
CONTRACT_FLOOR = 1e-6
#: The corrector gives up when an increment exceeds this fraction of the one before: it
#: admits the linear convergence (ratio 1/2) of Newton at a dead point reached exactly;
#: whether the result continues the branch is decided by the orientation and distance
#: tests (and, for sweeps, by :func:`branch_step_certified` with ``CONTRACTION``).
CORRECTOR_RATIO = 0.6
#: Increments below this (dimensionless) are rounding noise: no contraction test on them.
NOISE_STEP = 1e-11
#: A relative singular value below this leaves the orientation of a state undefined.
ORIENT_RATIO = 1e-7
#: Normal equations stand in for the SVD least-squares solve where ``det(G) / |G|_F^k``
#: (``G = A^T A``, a lower bound of ``(s_min / s_max)^2``) is at least this: then no singular
#: value lies near the cut-off and the rounding of the normal equations stays below
#: ``cond(A)^2 eps``, about 1e-10 of the step.
NORMAL_CERT = 1e-6

#: Batched steps are processed in chunks of this many rows, which bounds the memory
#: of the stacked Jacobians (rows x loop equations x unknowns) whatever the sweep length.
CHUNK = 2048
