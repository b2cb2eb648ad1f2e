"""Workflow: the analysis file and the whole run from images to report."""
