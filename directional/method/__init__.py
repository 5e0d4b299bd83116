"""The search itself: pure generators and functions, no I/O (no clock, disk, pool or objective call)."""
