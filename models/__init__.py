"""What the world is: the exoskeleton, the human arm and the cuffs that join them.

Everything here is a pure function of frozen, validated parameters, and every
robot or human description is emitted as URDF text that pinocchio loads.  This
package imports nothing else from the project.
"""

from .arm import ArmModel, check_urdf, load_arm, read_urdf_file
from .coupling import (
    DEFAULT_CUFFS,
    Assembly,
    Cuff,
    CuffSpec,
    Registration,
    assemble,
    fit_exo,
    strap_cuffs,
)
from .cuffs import CuffParams, CuffWrench, cuff_energy, cuff_wrench
from .errors import ModelError, ParameterError, SandboxError, UnknownNameError
from .exo import EXO_JOINTS, ExoParams, build_exo, exo_description, exo_urdf, load_exo
from .human import (
    SUBJECTS,
    HumanParams,
    ShoulderRhythm,
    Subject,
    build_human,
    girdle_posture,
    human_description,
    human_urdf,
)
from .inertia import Inertial
from .sites import SiteSpec

__all__ = [
    "ArmModel", "check_urdf", "load_arm", "read_urdf_file",
    "DEFAULT_CUFFS", "Assembly", "Cuff", "CuffSpec", "Registration", "assemble", "fit_exo", "strap_cuffs",
    "CuffParams", "CuffWrench", "cuff_energy", "cuff_wrench",
    "ModelError", "ParameterError", "SandboxError", "UnknownNameError",
    "EXO_JOINTS", "ExoParams", "build_exo", "exo_description", "exo_urdf", "load_exo",
    "SUBJECTS", "HumanParams", "ShoulderRhythm", "Subject", "build_human", "girdle_posture",
    "human_description", "human_urdf",
    "Inertial", "SiteSpec",
]
