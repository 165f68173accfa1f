"""The workflow steps: one function per product, which computes the product and writes it
(through an :class:`~basinkit.workflow.output.OutputFolder`), once. The commands and the
job runner call these and nothing else writes products, so the same settings give the
same files, layers, columns and values from a command and from a job file.

=================  ======================  ===============================================
step               command                 files
=================  ======================  ===============================================
:func:`flow_step`  ``route``               the flow folder (``flow.json`` + GeoTIFFs)
catchments_step    ``delineate``           catchments.csv/.gpkg/.json, outlet_errors.csv
channels_step      ``channels``            channel_segments.csv, channels.gpkg/.json,
                                           strahler_order.tif
profiles_step      ``profile``             profile.csv, steepness.csv, knickpoints.csv,
                                           flow_paths.csv, profiles.gpkg/.json, figures/
morphometry_step   ``morphometry``         morphometry.csv, hypsometry.csv,
                                           morphometry.json, figures/
design_flow_step   ``design-flow``         design_flows.csv/.gpkg/.json, hydrographs.csv,
                                           figures/
=================  ======================  ===============================================

Each step takes the output folder, its inputs (a FlowModel, the placed outlets, ...), a
settings object and a reporter (see :mod:`basinkit.workflow.progress`), and returns what
later steps need. Per-outlet failures are recorded in the step's tables and reported
through ``reporter.outlet_failed``; the other outlets go on.
"""

from .catchments import CatchmentSettings, CatchmentsResult, catchments_step
from .design_flow import DesignFlowResult, DesignFlowStepSettings, design_flow_step
from .channels import ChannelSettings, ChannelsResult, build_network, channels_step
from .flow import FlowSettings, flow_step, read_terrain
from .morphometry import MorphometryResult, MorphometrySettings, morphometry_step
from .profiles import ProfileSettings, ProfilesResult, profiles_step

__all__ = ["FlowSettings", "read_terrain", "flow_step",
           "CatchmentSettings", "CatchmentsResult", "catchments_step",
           "ChannelSettings", "ChannelsResult", "build_network", "channels_step",
           "ProfileSettings", "ProfilesResult", "profiles_step",
           "MorphometrySettings", "MorphometryResult", "morphometry_step",
           "DesignFlowStepSettings", "DesignFlowResult", "design_flow_step"]
