"""The analysis room: outlets, catchments and their polygons, channel networks, basin
morphometry and longitudinal profiles, all computed from a FlowModel."""
