"""ident: identify the inertial, friction and rotor-inertia parameters of robot arms.

The core (model, dynamics, regressor, base parameters) is imported with the package; the
workflow pieces that pull in heavier libraries (signal processing, the SDP solver, plotting)
are imported on first use of their names, so ``import ident`` stays quick.
"""

__version__ = "0.1.0"

import importlib as _importlib

from . import interrupts as _interrupts

if _interrupts.is_cli_process():  # before the heavy imports below: Ctrl-C at start-up is one line too
    _interrupts.install_startup()

from .arm.base import BaseParameters, base_parameters
from .arm.dynamics import (
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
from .arm.loader import load_robot
from .arm.model import JOINT_TERMS, Robot, parse_terms
from .arm.regressor import iter_regressor, predict, regressor, stream_regressor
from .arm.spatial import from_vector, pseudo_inertia, to_vector
from .errors import DataError, IdentError, ModelError, NumericalError

#: Public names imported on first use: name -> module.
_LAZY = {
    "ParameterSet": ".arm.parameters",
    "load_parameters": ".handover.paramfile",
    "parameter_set_from_vector": ".arm.parameters",
    "description_parameters": ".arm.parameters",
    "make_context": ".arm.parameters",
    "save_parameters": ".handover.paramfile",
    "Dataset": ".data.dataset",
    "LogOptions": ".data.options",
    "Segment": ".data.dataset",
    "apply_delay": ".data.delay",
    "estimate_dataset_delay": ".data.delay",
    "load_dataset": ".data.load",
    "load_profile": ".data.profile",
    "preliminary_delay": ".estimation.delay",
    "read_logs": ".data.load",
    "Bounds": ".estimation.result",
    "FitResult": ".estimation.result",
    "fit": ".estimation.estimate",
    "fit_compressed": ".estimation.estimate",
    "Compressor": ".estimation.compress",
    "PayloadResult": ".estimation.payload",
    "identify_payload": ".estimation.payload",
    "load_payload": ".estimation.payload",
    "save_payload": ".estimation.payload",
    "ExcitationConfig": ".motion.config",
    "ExcitationResult": ".motion.design",
    "FourierTrajectory": ".motion.fourier",
    "design_excitation": ".motion.design",
    "load_excitation_config": ".motion.config",
    "load_trajectory": ".motion.fourier",
    "write_excitation": ".motion.outputs",
    "SimulationResult": ".motion.simulate",
    "SimulationSettings": ".motion.simulate",
    "read_trajectory": ".motion.simulate",
    "simulate": ".motion.simulate",
    "write_log": ".motion.simulate",
    "Validation": ".handover.check",
    "validate": ".handover.check",
    "validate_dataset": ".handover.check",
    "export_parameters": ".handover.export",
    "export_urdf": ".handover.export",
    "export_urdf_text": ".handover.export",
    "export_mjcf": ".handover.mjcf",
    "collision_thresholds": ".handover.collision",
    "noise_floor": ".handover.noise",
    "render_report": ".handover.report",
    "write_report": ".handover.report",
}


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(_importlib.import_module(_LAZY[name], __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'ident' has no attribute '{name}'")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
