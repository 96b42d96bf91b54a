"""Specledger: calibration-set design and lifecycle registry for infrared fuel-property models."""

__version__ = "0.1.0"
