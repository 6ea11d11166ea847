"""OpenCV reference for `vfcoach bench`: the same measurements with Debian's
python3-opencv on one thread, on synthetic frames of the same kind and sizes,
and the speed ratio reference_ms / vfcoach_ms per size.

Per frame (XRGB8888 as BGRA bytes, like the bench):
  tone     luma (cvtColor), 256-bin histogram (calcHist) and clip fractions,
           exposure (sRGB decode through a 256-entry float LUT, BT.709
           weights, mean), colourfulness (Hasler & Suesstrunk: R-G and
           (R+G)/2-B, meanStdDev), variance of the 3x3 Laplacian (CV_64F),
           box downscale to the 320-wide analysis image (INTER_AREA) of the
           colour frame and of the Laplacian and its square
  compose  Canny + HoughLines on the analysis luma (level and horizon),
           spectral-residual saliency (cv2.saliency) with its threshold and
           moments (subject, balance), phase correlation against the
           previous analysis frame (steadiness)
Both sides are timed per frame in thread CPU time (time.thread_time here,
CLOCK_THREAD_CPUTIME_ID in vfcoach bench) and summarised by the median, so a
busy shared machine distorts the ratio as little as possible.

Usage: bench_reference.py PATH_TO_VFCOACH [--frames N]
"""
import re
import subprocess
import sys
import time

import cv2
import numpy as np

SIZES = [(1280, 720), (1920, 1080), (3840, 2160)]


def render(w, h, k):
    """Sky gradient, textured sea, tilted horizon, a bright boat (k varies)."""
    ang = np.deg2rad(2.0 * np.sin(k * 0.37))
    hy = h * (0.42 + 0.03 * np.sin(k * 0.23))
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    yh = hy - np.tan(ang) * (xx - w * 0.5)
    sky = yy < yh
    s = np.clip(yy / np.maximum(yh, 1), 0, 1)
    rng = np.random.default_rng(k)
    n = rng.integers(-16, 16, size=(h, w)).astype(np.float32)
    wave = 12 * np.sin(xx * 0.05 + yy * 0.21 + k * 0.3)
    r = np.where(sky, 70 + 120 * s, 30 + n / 2 + wave)
    g = np.where(sky, 110 + 90 * s, 70 + n + wave)
    b = np.where(sky, 190 + 40 * s, 100 + n + wave)
    bx, by = w * (0.2 + 0.6 * ((k * 0.013) % 1.0)), hy + h * 0.05
    boat = (np.abs(xx - bx) < w * 0.03) & (np.abs(yy - by) < h * 0.025)
    r[boat], g[boat], b[boat] = 235, 225, 200
    img = np.stack([b, g, r, np.full_like(r, 255)], axis=-1)
    return np.clip(img, 0, 255).astype(np.uint8)


def srgb_lut():
    v = np.arange(256) / 255.0
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4).astype(np.float32)


LUT = srgb_lut().reshape(1, 256)
W709 = np.array([[0.0722, 0.7152, 0.2126]], dtype=np.float32)  # B, G, R
SAL = cv2.saliency.StaticSaliencySpectralResidual_create()


def tone(bgra):
    h, w = bgra.shape[:2]
    bgr = cv2.cvtColor(bgra, cv2.COLOR_BGRA2BGR)
    luma = cv2.cvtColor(bgr, cv2.COLOR_BGR2GRAY)
    hist = cv2.calcHist([luma], [0], None, [256], [0, 256])
    n = float(w * h)
    clip_hi, clip_lo = hist[250:].sum() / n, hist[:6].sum() / n
    lin = cv2.LUT(bgr, np.repeat(LUT, 3, axis=0).T.reshape(1, 256, 3).copy())
    y = cv2.transform(lin, W709)
    ev = np.log2(max(cv2.mean(y)[0], 1e-6) / 0.18)
    b, g, r = cv2.split(bgr)
    rg = cv2.subtract(r, g, dtype=cv2.CV_16S)
    yb = cv2.subtract(cv2.addWeighted(r, 0.5, g, 0.5, 0, dtype=cv2.CV_32F),
                      b, dtype=cv2.CV_32F)
    m_rg, s_rg = cv2.meanStdDev(rg)
    m_yb, s_yb = cv2.meanStdDev(yb)
    M = np.hypot(s_rg[0, 0], s_yb[0, 0]) + 0.3 * np.hypot(m_rg[0, 0], m_yb[0, 0])
    lap = cv2.Laplacian(luma, cv2.CV_64F)
    _, sd = cv2.meanStdDev(lap)
    sharp = sd[0, 0] ** 2
    scale = max(1, w // 320)
    aw, ah = w // scale, h // scale
    small = cv2.resize(bgr, (aw, ah), interpolation=cv2.INTER_AREA)
    small_luma = cv2.resize(luma, (aw, ah), interpolation=cv2.INTER_AREA)
    lap32 = lap.astype(np.float32)
    small_lap = cv2.resize(lap32, (aw, ah), interpolation=cv2.INTER_AREA)
    small_lap2 = cv2.resize(cv2.multiply(lap32, lap32), (aw, ah), interpolation=cv2.INTER_AREA)
    return (clip_hi, clip_lo, ev, M, sharp), small, small_luma, small_lap2


def compose(small_luma, prev):
    edges = cv2.Canny(small_luma, 50, 150)
    lines = cv2.HoughLines(edges, 1, np.pi / 720, 60)
    ok, sal = SAL.computeSaliency(small_luma)
    sal8 = (sal * 255).astype(np.uint8)
    _, mask = cv2.threshold(sal8, 0, 255, cv2.THRESH_BINARY | cv2.THRESH_OTSU)
    mom = cv2.moments(mask, binaryImage=True)
    cur = small_luma.astype(np.float32)
    shift = cv2.phaseCorrelate(prev, cur) if prev is not None else ((0, 0), 0)
    return lines, mom, shift, cur


def run_reference(w, h, frames):
    nb = 4
    imgs = [render(w, h, k) for k in range(nb)]
    t_tone, t_comp = [], []
    prev = None
    for i in range(frames + 3):
        img = imgs[i % nb]
        t0 = time.thread_time()
        _, small, small_luma, _ = tone(img)
        t1 = time.thread_time()
        _, _, _, prev = compose(small_luma, prev)
        t2 = time.thread_time()
        if i >= 3:  # warm-up frames untimed
            t_tone.append((t1 - t0) * 1e3)
            t_comp.append((t2 - t1) * 1e3)
    tot = [a + b for a, b in zip(t_tone, t_comp)]
    return float(np.median(t_tone)), float(np.median(t_comp)), float(np.median(tot))


def main():
    if len(sys.argv) < 2:
        print("usage: bench_reference.py PATH_TO_VFCOACH [--frames N]", file=sys.stderr)
        return 2
    vf = sys.argv[1]
    frames = 30
    if len(sys.argv) >= 4 and sys.argv[2] == "--frames":
        frames = int(sys.argv[3])
    cv2.setNumThreads(1)
    print("reference: OpenCV %s, cv2.setNumThreads(1), %d frames per size" % (cv2.__version__, frames))
    ours = {}
    for w, h in SIZES:
        out = subprocess.run([vf, "bench", "--size", "%dx%d" % (w, h), "--frames", "100"],
                             capture_output=True, text=True)
        m = re.search(r"^bench (\d+)x(\d+) total_ms_median=([0-9.]+)$", out.stdout, re.M)
        if out.returncode != 0 or not m:
            print("bench_reference: vfcoach bench failed for %dx%d: %s" % (w, h, out.stderr.strip()),
                  file=sys.stderr)
            return 1
        ours[(w, h)] = float(m.group(3))
    for w, h in SIZES:
        rt, rc, rtot = run_reference(w, h, frames)
        v = ours[(w, h)]
        print("reference %dx%d tone_ms=%.3f compose_ms=%.3f total_ms_median=%.3f  "
              "vfcoach total_ms_median=%.3f  ratio=%.1fx" % (w, h, rt, rc, rtot, v, rtot / v))
    return 0


if __name__ == "__main__":
    sys.exit(main())
