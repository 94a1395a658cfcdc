"""The ground floor's row times: a rolling-shutter row offset and mid-exposure, applied in one place."""

from __future__ import annotations

import numpy as np
import pytest

from hopscope.shared.video import point_times_s, row_offsets_s

#: Times are sums of a few doubles.
TIME_TOL_S = 1e-15


def test_row_offset_runs_from_top_to_bottom_row():
    # row r starts exposing r·τ_line after row 0, τ_line = readout / rows (Liang, Chang & Chen 2008,
    # IEEE TIP 17:1323, sec. II; from memory): the bottom row of 720 at 4 ms readout is 4·719/720 ms late
    rows, readout = 720, 4e-3
    off = row_offsets_s(np.array([0.0, 360.0, 719.0]), rows, readout)
    np.testing.assert_allclose(off, [0.0, 2e-3, 4e-3 * 719 / 720], rtol=0, atol=TIME_TOL_S)


def test_point_times_add_frame_time_row_offset_and_half_exposure():
    t = point_times_s(np.array([0.01, 0.02]), np.array([100.0, 500.0]), 1000, 2e-3, exposure_s=1e-4)
    np.testing.assert_allclose(t, [0.01 + 2e-4 + 5e-5, 0.02 + 1e-3 + 5e-5], rtol=0, atol=TIME_TOL_S)
    # a global shutter without a known exposure: the frame's own time
    np.testing.assert_array_equal(point_times_s(np.array([0.5]), np.array([300.0]), 720, 0.0), [0.5])


def test_bad_readout_and_exposure_are_rejected():
    with pytest.raises(ValueError, match="readout: expected a finite readout time >= 0"):
        row_offsets_s(np.array([1.0]), 720, -1e-3)
    with pytest.raises(ValueError, match="rows: expected a positive frame height"):
        row_offsets_s(np.array([1.0]), 0, 1e-3)
    with pytest.raises(ValueError, match="exposure: expected a finite exposure time"):
        point_times_s(np.array([0.0]), np.array([1.0]), 720, 0.0, exposure_s=float("nan"))


def test_tracker_reads_video_through_the_ground_floor():
    import hopscope.shared.video as shared_video
    import hopscope.tracker.video as tracker_video

    for name in (
        "iter_frames",
        "VideoFrame",
        "probe_video",
        "VideoInfo",
        "check_frame_rate",
        "timing_warnings",
    ):
        assert getattr(tracker_video, name) is getattr(shared_video, name)
