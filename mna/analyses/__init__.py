"""Analyses: the DC operating point and the transient run."""
