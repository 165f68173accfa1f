"""The cautions every command prints (once, not with ``--quiet``) and every output carries:
in the JSON record of each step, the GeoPackage layer metadata, the GeoTIFF tags, the job's
provenance.json and the report."""

__all__ = ["CAUTIONS", "CAUTION_TEXT"]

CAUTIONS = (
    "Catchment boundaries, flow paths, channels, profiles and everything measured from them "
    "are estimates derived from a DEM; their accuracy depends on the DEM's resolution, "
    "vertical accuracy and date.",
    "Culverts, storm sewers, diversions and other structures are not represented unless "
    "they were burned into the DEM; anything not burned in acts as solid ground, so a road "
    "embankment acts as a dam.",
    "Verify boundaries, outlet positions and flow paths in the field.",
    "Follow the local drainage manual, and defer to local codes and licensed professional "
    "practice for any permit or design decision.",
)

CAUTION_TEXT = " ".join(CAUTIONS)
