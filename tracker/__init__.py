"""Video reading with real timestamps, BB detection and localisation, association and track files.

Stages (in pipeline order; a stage of several modules is imported from the first one named):

``tracker.video``       streamed PyAV luma frames with container times (VFR), ``--fps`` override, timing checks
``tracker.background``  temporal median of frames k ± g, ±2g, ±3g (ring buffer), noise map
``tracker.detect``      candidate blobs above a noise-scaled threshold, both polarities, two-level pyramid
``tracker.localise``    spot / streak model fits (centre = mid-exposure position) with σ from the local noise,
                        floored at the Cramér–Rao bound; a marked (half-dark) BB fitted by its outline:
  ``tracker.spotfit``   ``Detection``, ``localise``: the spot and streak fits, which one is kept
  ``tracker.profiles``  the spot and streak image models and their Jacobians
  ``tracker.leastsq``   the small Levenberg–Marquardt solver, the fit's covariance
  ``tracker.noise``     the window's noise σ, correlated noise, the σ floor (Cramér–Rao bound)
  ``tracker.marked``    ``localise_marked``: the marked-ball model, its fit and the ball's own light
``tracker.associate``   physics-gated linking into shots, outlier and distractor rejection, scatter check
``tracker.select``      which smooth track is the BB: image size at the flight plane, speed band, fall under
                        gravity within a plausible lift, drag; playback timing seen in the fall
``tracker.pipeline``    ``track_video(video, rig, TrackOptions(...)) -> TrackResult``: the frame loop, timing,
                        rolling shutter, metres and σ through the rig, calibration-ensemble offsets:
  ``tracker.options``   ``TrackOptions``, ``TrackSummary``, ``TrackResult``, ``POLARITIES``
  ``tracker.prefetch``  the decoding thread (``prefetched``)
  ``tracker.windows``   which blobs are fitted and in which window (slow blobs, a marked BB's halves)
  ``tracker.choose``    which tracks are the BB's shots (linking each polarity, judging each track)
  ``tracker.shots``     the chosen shots as a ``Track``: σ, times, metres, brightness, start speeds
``tracker.trackfile``   ``Track``/``TrackMeta``, ``track_to_csv``, ``read_track`` (schema hopscope.track/1)
``tracker.overlay``     contact sheet (PNG/JPEG) or annotated video

Pixel (u, v) = (col, row), centre of the top-left pixel at (0, 0); times in seconds since the first frame.
"""
