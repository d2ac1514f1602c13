"""Plots and reports of results."""
