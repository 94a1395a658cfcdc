"""Camera model, grid detection, flight-plane pose, world frame, drop check and rig files.

Flow: lens and plane images → :func:`calibration.grid.detect_grid` (every detector's corners, ``--grid`` in
either order) → :func:`calibration.corners.choose_by_evidence` (per image, the corners with the smallest
residual under a provisional lens model) → :func:`calibration.lens.calibrate_lens` (Zhang 2000; the plane
views join the lens views) → :func:`calibration.plane.solve_plane` (joint PnP of all placements, their
offsets solved with the tape as prior); :func:`calibration.build.make_rig` (with the bootstrap ensemble
that carries the calibration's uncertainty); optional :func:`calibration.drop.check_drop` (release-aware,
a typed :class:`calibration.dropcheck.DropCheck`; the fall fit in :mod:`calibration.freefall`, the ball's
detection in :mod:`calibration.dropclip`) / :func:`calibration.drop.apply_level`.
:func:`calibration.pipeline.calibrate_files` does all of it from file arguments, and refuses a rig that
fails its own drop check unless asked to keep it (``drop_check.kept_by_user``). A ChArUco board
(:mod:`calibration.charuco`, ``--board charuco``) replaces the first two steps: its markers name each corner,
so lens views with part of the board at the frame edges count. :func:`calibration.dragbound.drag_bound`
states the C_D error the rig's geometry allows.

The product is a :class:`calibration.rig.Rig` (``rig.json``, schema ``hopscope.rig/1``; one camera state,
nominal or ensemble member, is a :class:`calibration.camera.CameraState`): ``pixel_to_world``,
``world_to_pixel``, ``pixel_to_world_jacobian``, ``ensemble_pixel_to_world``, ``digest``; I/O
``rig_to_json``, ``rig_from_json``, ``read_rig``.

World frame: x downrange (along the board's rows toward image right), y up, z toward the camera, metres;
origin at the first plane placement's first inner corner (top left in the image). Pixels (u, v) in
OpenCV order, the centre of the top-left pixel at (0, 0).
"""
