"""Video reading with real timestamps, BB detection and localisation, association and track files."""
