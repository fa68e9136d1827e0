"""Calibration against a measured I-V."""
