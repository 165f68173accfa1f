"""The I/O room: reading DEMs, outlet and line files and flow folders; atomic writers of
GeoTIFF, GeoPackage, CSV and JSON; provenance records."""
