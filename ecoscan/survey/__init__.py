"""Whole surveys: many rasters (sites, dates), one plot layer, one set of settings."""
