"""Fits of measured and simulated scans: calibration curves and the rig changes they imply."""
