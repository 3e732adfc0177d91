"""The fit: streaming compression of the regressor, least squares, the physically consistent SDP,
the fit result with its uncertainty, the preliminary-fit delay estimate, and payloads."""
