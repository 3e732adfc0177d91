"""The arm: the model built from a description (URDF or DH), spatial algebra, the compiled kernels,
batched dynamics, the parameter regressor, the base parameters, and the arm's parameter set."""
