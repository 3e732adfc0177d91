"""ident: identify the inertial, friction and rotor-inertia parameters of robot arms.

The core (model, dynamics, regressor, base parameters) is imported with the package; the
workflow pieces that pull in heavier libraries (signal processing, the SDP solver, plotting)
are imported on first use of their names, so ``import ident`` stays quick.
"""

__version__ = "0.1.0"

from .errors import DataError, IdentError, ModelError, NumericalError
from .model import JOINT_TERMS, Robot, load_robot, parse_terms
from .spatial import from_vector, pseudo_inertia, to_vector
from .dynamics import (
    body_poses,
    energy,
    forward_dynamics,
    frame_pose,
    gravity_torque,
    inverse_dynamics,
    jacobian,
    mass_matrix,
    velocity_torque,
    wrench_torque,
)
from .regressor import iter_regressor, predict, regressor, stream_regressor
from .base import BaseParameters, base_parameters

import importlib as _importlib

#: Public names imported on first use: name -> module.
_LAZY = {
    "ParameterSet": ".paramfile",
    "load_parameters": ".paramfile",
    "parameter_set_from_vector": ".paramfile",
    "save_parameters": ".paramfile",
    "Dataset": ".logs",
    "LogOptions": ".logs",
    "Segment": ".logs",
    "apply_delay": ".logs",
    "estimate_dataset_delay": ".logs",
    "load_dataset": ".logs",
    "load_profile": ".logs",
    "preliminary_delay": ".logs",
    "read_logs": ".logs",
    "Bounds": ".estimate",
    "FitResult": ".estimate",
    "fit": ".estimate",
    "fit_compressed": ".estimate",
    "Compressor": ".compress",
    "PayloadResult": ".payload",
    "identify_payload": ".payload",
    "load_payload": ".payload",
    "save_payload": ".payload",
    "ExcitationConfig": ".excitation",
    "ExcitationResult": ".excitation",
    "FourierTrajectory": ".excitation",
    "design_excitation": ".excitation",
    "load_excitation_config": ".excitation",
    "load_trajectory": ".excitation",
    "write_excitation": ".excitation",
    "SimulationResult": ".simulate",
    "SimulationSettings": ".simulate",
    "read_trajectory": ".simulate",
    "simulate": ".simulate",
    "write_log": ".simulate",
    "Validation": ".validate",
    "validate": ".validate",
    "validate_dataset": ".validate",
    "export_parameters": ".export",
    "export_urdf": ".export",
    "export_urdf_text": ".export",
    "render_report": ".report",
    "write_report": ".report",
}


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(_importlib.import_module(_LAZY[name], __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'ident' has no attribute '{name}'")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
