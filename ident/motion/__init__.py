"""The motion: the Fourier trajectory family, the excitation config, keep-out regions, constraints,
information criteria, the optimizer and its outputs; and the closed-loop simulator."""
