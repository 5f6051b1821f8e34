"""Intake: read calibration data (CSV, .npy, .npz) in bounded-memory chunks."""
