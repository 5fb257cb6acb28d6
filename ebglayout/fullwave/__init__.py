"""Full-wave check of a drawn filter on openEMS (FDTD): model description, engine run, 4-port result."""
