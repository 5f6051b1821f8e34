"""Workflow: the command line on top of the stages."""
