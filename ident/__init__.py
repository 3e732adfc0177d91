"""ident: identify the inertial, friction and rotor-inertia parameters of robot arms."""

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
from .paramfile import ParameterSet, load_parameters, parameter_set_from_vector, save_parameters
from .logs import Dataset, LogOptions, Segment, apply_delay, estimate_dataset_delay, load_dataset, load_profile, preliminary_delay, read_logs
from .estimate import Bounds, FitResult, fit, fit_compressed
from .compress import Compressor
from .payload import PayloadResult, identify_payload, load_payload, save_payload
from .excitation import ExcitationConfig, ExcitationResult, FourierTrajectory, design_excitation, load_excitation_config, load_trajectory, write_excitation
from .simulate import SimulationResult, SimulationSettings, read_trajectory, simulate, write_log
from .validate import Validation, validate, validate_dataset
from .export import export_parameters, export_urdf, export_urdf_text
from .report import render_report, write_report
