"""Job files and the job runner under their earlier module name: the schema and reader live
in :mod:`basinkit.workflow.jobfile`, the runner in :mod:`basinkit.workflow.runner`."""

from ..analysis.outlets import sanitize_ids
from .jobfile import JOB_SCHEMA, JobSpec, demo_job_path, job_from_dict, read_job
from .runner import JobResult, run_job

__all__ = ["JOB_SCHEMA", "JobSpec", "JobResult", "demo_job_path", "job_from_dict", "read_job",
           "run_job"]


def _safe(outlet_id) -> str:
    """The file id of one outlet id (:func:`basinkit.analysis.outlets.sanitize_ids`)."""
    return sanitize_ids([outlet_id])[0]
