"""hopscope.shared: the ground floor every stage uses (units and constants, video frames, file parsing, atomic writes)."""
