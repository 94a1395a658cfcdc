"""hopscope: measure BB flight from high-frame-rate video (the app package: CLI, pipeline, report, scenes)."""

__version__ = "0.1.0"
