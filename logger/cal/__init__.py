"""Calibration: fitting curves to reference points, profiles on disk, and applying them to raw counts."""
