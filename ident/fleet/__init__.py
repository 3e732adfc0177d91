"""Fleet scale: many arms, routine logs, fits per period on a Dask cluster, friction drift flags.

``catalog`` (which logs belong to which arm and period), ``tasks`` (the map and reduce work units),
``engine`` (the Dask client side), ``drift`` (flags), ``outputs`` (table, parameter files) and
``report`` (the HTML fleet report).
"""
