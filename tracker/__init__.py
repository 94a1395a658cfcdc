"""Video reading with real timestamps, BB detection and localisation, association and track files.

Stages (one module each, in pipeline order):

``tracker.video``       streamed PyAV luma frames with container times (VFR), ``--fps`` override, timing checks
``tracker.background``  temporal median of frames k ± g, ±2g, ±3g (ring buffer), noise map
``tracker.detect``      candidate blobs above a noise-scaled threshold, both polarities, two-level pyramid
``tracker.localise``    spot / streak model fits (centre = mid-exposure position) with σ from the local noise,
                        floored at the Cramér–Rao bound; a marked (half-dark) BB fitted by its outline
``tracker.associate``   physics-gated linking into shots, outlier and distractor rejection, scatter check
``tracker.select``      which smooth track is the BB: image size at the flight plane, speed band, fall under
                        gravity within a plausible lift, drag; playback timing seen in the fall
``tracker.pipeline``    ``track_video(video, rig, TrackOptions(...)) -> TrackResult``: timing, rolling
                        shutter, metres and σ through the rig, calibration-ensemble offsets
``tracker.trackfile``   ``Track``/``TrackMeta``, ``track_to_csv``, ``read_track`` (schema hopscope.track/1)
``tracker.overlay``     contact sheet (PNG/JPEG) or annotated video

Pixel (u, v) = (col, row), centre of the top-left pixel at (0, 0); times in seconds since the first frame.
"""
