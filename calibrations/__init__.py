"""Shipped calibration tables (package data of specpar; see README.md here)."""
