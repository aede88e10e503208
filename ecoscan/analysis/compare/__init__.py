"""Comparison of groups of plots (sites, dates, plots): density and spacing, every pair."""
