"""Flight physics and estimation (pure SI; no OpenCV, no other stage)."""
