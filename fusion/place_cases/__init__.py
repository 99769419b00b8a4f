"""Jobs on place-graph cases: reading a case, simulating its drive, running, comparing, inspecting, measuring
targets and timing; the graph model itself (frame, motion, sensors, filters) is ``fusion.places``."""
