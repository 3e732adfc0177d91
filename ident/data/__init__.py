"""The data: log profiles, table and bag readers, checks, conditioning (parallel filtering,
derivatives, decimation, period averaging), the data set of segments, and the torque delay."""
