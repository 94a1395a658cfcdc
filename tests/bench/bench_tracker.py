"""Benchmark of the tracker: wall time against a bare decode of the same file, and peak memory.

Run: ``python tests/bench/bench_tracker.py [--frames N] [--long-frames M] [--keep DIR]``.

Figures printed:

1. A 1080p H.264 clip (textured wall, sensor noise, one BB flight): ``hopscope track``'s pipeline wall
   time ÷ a bare OpenCV ``VideoCapture.read()`` loop over the same file (target ≤ 1.15: decoding is the
   physical limit), with PyAV's bare decode beside it.
2. Sub-pixel localisation beside trackpy (Allan et al., trackpy, Zenodo doi:10.5281/zenodo.1226458; the
   Crocker & Grier 1996 centroid, J. Colloid Interface Sci. 179:298): RMS error against truth and time per
   spot on the same synthetic spots (31×31 windows), and trackpy.locate on a whole 640x360 frame.
3. Peak resident memory of a tracking run in a fresh process (VmHWM of the child, imports included) on
   clips of different lengths: it must not grow with the clip's length (target ≤ 400 MB at 10,000 frames).
   The 10,000-frame clip is 640x360 (a 1080p one takes too long to generate here); the 1080p figure is
   measured at two lengths to show the flat profile.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import av
import cv2
import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "tracker"))

from track_synth import draw_bb, simple_rig, textured_background  # noqa: E402

from hopscope.calibration.rig import rig_to_json  # noqa: E402


def make_clip(path: Path, width: int, height: int, n: int, *, bb_frames=(100, 160), seed=0) -> Path:
    """A clip with a static textured wall, fresh noise each frame and a BB crossing during bb_frames."""
    if path.exists():
        return path
    rng = np.random.default_rng(seed)
    wall = textured_background((height, width), level=90.0, contrast=14.0, rng=rng)
    noises = [rng.normal(0, 2.0, (height, width)) for _ in range(7)]
    c = av.open(str(path), "w")
    s = c.add_stream("libx264", rate=240)
    s.width, s.height, s.pix_fmt = width, height, "yuv420p"
    s.options = {"preset": "veryfast", "crf": "18"}
    f0, f1 = bb_frames
    for k in range(n):
        img = wall + np.roll(noises[k % 7], 37 * k, axis=1)
        if f0 <= k < f1:
            t = (k - f0) / (f1 - f0)
            u = 0.05 * width + 0.9 * width * t
            v = 0.45 * height + 0.05 * height * t * t
            img = img + draw_bb((height, width), u, v, radius_px=max(2.0, width / 480), amplitude=120.0)
        fr = av.VideoFrame.from_ndarray(np.clip(img, 0, 255).astype(np.uint8), format="gray")
        for pkt in s.encode(fr.reformat(format="yuv420p")):
            c.mux(pkt)
    for pkt in s.encode():
        c.mux(pkt)
    c.close()
    return path


def opencv_decode(path: Path) -> tuple[float, int]:
    cap = cv2.VideoCapture(str(path))
    t = time.perf_counter()
    n = 0
    while True:
        ok, _ = cap.read()
        if not ok:
            break
        n += 1
    cap.release()
    return time.perf_counter() - t, n


def pyav_decode(path: Path) -> tuple[float, int]:
    t = time.perf_counter()
    n = 0
    with av.open(str(path)) as c:
        for f in c.decode(video=0):
            np.frombuffer(f.planes[0], np.uint8)
            n += 1
    return time.perf_counter() - t, n


# The child resets its peak-RSS mark first (a forked child inherits the parent's high-water mark on Linux;
# writing 5 to /proc/self/clear_refs resets VmHWM, proc(5)), then reports VmHWM after tracking.
_CHILD = r"""
import sys, time
open("/proc/self/clear_refs", "w").write("5")
sys.path.insert(0, {root!r})
from hopscope.calibration.rig import read_rig
from hopscope.tracker.pipeline import track_video
t = time.perf_counter()
res = track_video({video!r}, read_rig({rig!r}))
dt = time.perf_counter() - t
hwm = [l for l in open("/proc/self/status") if l.startswith("VmHWM")][0].split()[1]
print(dt, res.summary.points, res.summary.frames_read, hwm)
"""


def tracked_in_child(video: Path, rig: Path) -> tuple[float, int, int, float]:
    """(wall time s, points, frames, peak RSS MB) of a tracking run in a fresh Python process."""
    code = _CHILD.format(root=str(ROOT), video=str(video), rig=str(rig))
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.split()
    return float(out[0]), int(out[1]), int(out[2]), int(out[3]) / 1024.0


def localisation_vs_trackpy(n: int = 200, seed: int = 1) -> None:
    import math
    import warnings

    import trackpy as tp

    from hopscope.tracker.localise import localise

    tp.quiet()
    rng = np.random.default_rng(seed)
    for radius, psf, noise in [(2.5, 0.7, 3.0), (1.5, 0.7, 4.0)]:
        spots = []
        for _ in range(n):
            u, v = 15 + rng.uniform(-0.5, 0.5), 15 + rng.uniform(-0.5, 0.5)
            img = 40.0 + draw_bb((31, 31), u, v, radius_px=radius, psf_px=psf, amplitude=120.0)
            spots.append((img + rng.normal(0, noise, img.shape), u, v))
        t = time.perf_counter()
        ours = []
        for img, u, v in spots:
            d = localise(img - np.median(img), (0, 0), frame=0, sign=1)
            ours.append((d.u_px - u, d.v_px - v))
        t_ours = (time.perf_counter() - t) / n
        diameter = 2 * math.ceil(radius + 2 * psf) + 1
        ref = []
        t = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for img, u, v in spots:
                f = tp.locate(img, diameter, minmass=50, topn=1)
                ref.append((float(f.x.iloc[0]) - u, float(f.y.iloc[0]) - v))
        t_tp = (time.perf_counter() - t) / n
        r_o = float(np.sqrt(np.mean(np.square(ours))))
        r_t = float(np.sqrt(np.mean(np.square(ref))))
        print(
            f"  BB radius {radius} px, noise {noise} DN: ours {r_o:.4f} px rms, {t_ours * 1e3:.2f} ms/spot; "
            f"trackpy {r_t:.4f} px rms, {t_tp * 1e3:.2f} ms/spot"
        )
    frame = 40.0 + rng.normal(0, 3.0, (360, 640))
    frame += draw_bb((360, 640), 300.3, 180.6, radius_px=2.5, amplitude=120.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t = time.perf_counter()
        for _ in range(5):
            tp.locate(frame, 7, minmass=200)
        t_full = (time.perf_counter() - t) / 5
    print(
        f"  trackpy.locate on a whole 640x360 frame: {t_full * 1e3:.1f} ms (our pipeline: see the fps above)"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=600, help="length of the 1080p clip")
    ap.add_argument("--long-frames", type=int, default=10000, help="length of the long 640x360 clip")
    ap.add_argument("--keep", default=None, help="folder to keep (and reuse) the generated clips")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    folder = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="hopscope-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    print(f"clips in {folder} ({os.cpu_count()} CPU cores, shared)")

    hd = make_clip(folder / f"hd_{args.frames}.mp4", 1920, 1080, args.frames)
    rig_hd = folder / "rig_hd.json"
    rig_hd.write_text(rig_to_json(simple_rig(1920, 1080, focal_px=2400.0)))

    cv_t, py_t, tr_t = [], [], []
    for _ in range(args.repeats):
        cv_t.append(opencv_decode(hd)[0])
        py_t.append(pyav_decode(hd)[0])
        t, pts, frames, _ = tracked_in_child(hd, rig_hd)
        tr_t.append(t)
    n = args.frames
    cvb, pyb, trb = min(cv_t), min(py_t), min(tr_t)
    print(f"\n1080p clip, {n} frames, BB in 60 of them: {pts} points tracked")
    print(f"  OpenCV read() loop      {cvb:7.2f} s  ({n / cvb:6.1f} fps)")
    print(f"  PyAV decode (luma)      {pyb:7.2f} s  ({n / pyb:6.1f} fps)")
    print(f"  tracker (track_video)   {trb:7.2f} s  ({n / trb:6.1f} fps)")
    print(f"  ratio tracker / OpenCV  {trb / cvb:7.3f}   (target <= 1.15; best of {args.repeats})")

    print("\nlocalisation beside trackpy (same spots, same truth):")
    localisation_vs_trackpy()

    print("\npeak memory of a tracking run (fresh process, VmHWM, imports included):")
    short = make_clip(folder / "hd_200.mp4", 1920, 1080, 200, bb_frames=(60, 120))
    for clip in (short, hd):
        t, pts, frames, mb = tracked_in_child(clip, rig_hd)
        print(f"  1080p   {frames:6d} frames  {mb:7.1f} MB  ({pts} points, {t:.1f} s)")
    rig_s = folder / "rig_360.json"
    rig_s.write_text(rig_to_json(simple_rig(640, 360, focal_px=800.0)))
    for m in (1000, args.long_frames):
        clip = make_clip(folder / f"s_{m}.mp4", 640, 360, m, bb_frames=(m // 2, m // 2 + 40))
        t, pts, frames, mb = tracked_in_child(clip, rig_s)
        print(
            f"  640x360 {frames:6d} frames  {mb:7.1f} MB  ({pts} points, {t:.1f} s)   (target <= 400 MB at 10,000)"
        )


if __name__ == "__main__":
    main()
