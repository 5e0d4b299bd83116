"""The public entry points: minimize, calibrate, explore, line_minimum."""
