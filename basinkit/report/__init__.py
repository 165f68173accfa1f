"""The report room: the self-contained HTML report, built only from the files the workflow
steps wrote into an output folder (:func:`write_report`)."""

from .build import render_report, write_report

__all__ = ["write_report", "render_report"]
