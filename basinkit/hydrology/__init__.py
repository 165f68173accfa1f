"""The hydrology room: design flows at outlets for planning — time of concentration by
several published methods, curve-number and Rational-method runoff, design rainfall
(depth, IDF tables, NRCS 24-hour distributions, user hyetographs), the NRCS dimensionless
unit hydrograph and the design hydrograph.

Takes arrays and basinkit objects (FlowModel, Delineation, Profile), never paths; reading
rainfall tables and land-cover layers lives in :mod:`basinkit.io`.

These are planning-level estimates: land cover, rainfall and method must follow the local
agency's drainage manual, and design is the work of a licensed professional.
"""
