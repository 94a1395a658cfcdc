"""Camera model, grid detection, flight-plane pose, world frame, drop check and rig files."""
