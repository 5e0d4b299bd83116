"""Running a search: the driver that evaluates batches, interrupts, progress and the journal."""
