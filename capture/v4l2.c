/* V4L2 cameras through libv4l2.
 *
 * Threads: cap_v4l2_open() and destroy run on the owner's thread; once the
 * source is handed to the capture thread, produce() and recover() run there
 * only, so nothing here is shared between threads and nothing is locked.
 * Frames: mmap streaming with a few driver buffers; produce() dequeues the
 * newest filled buffer, copies or converts it into a mailbox buffer and
 * queues the driver buffer again at once, so the driver never starves.
 * Drop policy: the mailbox keeps only the newest frame; frames the driver
 * marks as erroneous and JPEG frames that fail to decode are skipped.
 *
 * Formats: YUYV, NV12, GREY, RGB24 and BGR24 reach the analysis as they
 * are (with the driver's colour information); UYVY, YVYU, NV21, YU12 and
 * YV12 are reordered into YUYV or NV12 by us, keeping that information;
 * MJPEG, JPEG, RGB565 and Bayer are turned into RGB24 by our own
 * libv4lconvert instance, because libv4l2's built-in
 * conversion chooses its source format without looking at frame rates
 * (it would take YUYV at 10 fps over MJPEG at 30).  libv4l2 is still what
 * opens the device, so multi-planar drivers work through its plugin. */
#include <errno.h>
#include <fcntl.h>
#include <libv4l2.h>
#include <libv4lconvert.h>
#include <libv4l-plugin.h>
#include <limits.h>
#include <linux/videodev2.h>
#include <math.h>
#include <poll.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/ioctl.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "capture/v4l2_internal.h"

/* ---- the seam's production side: libv4l2 ------------------------------- */

/* libv4l2 writes its error lines to stderr unless v4l2_log_file is set;
 * our own line names the device and the cause already, so they go nowhere
 * (LIBV4L2_LOG_FILENAME still wins, for debugging). */
static ssize_t discard_write(void *cookie, const char *buf, size_t n)
{
    (void)cookie;
    (void)buf;
    return (ssize_t)n;
}

static pthread_once_t g_log_once = PTHREAD_ONCE_INIT;

static void quiet_libv4l2(void)
{
    if (!v4l2_log_file && !getenv("LIBV4L2_LOG_FILENAME"))
        v4l2_log_file = fopencookie(NULL, "w", (cookie_io_functions_t){.write = discard_write});
}

/* libv4l2 prints its own lines to stderr when a node is not a V4L2 device;
 * asking the kernel first keeps a bad --device to our one line. */
static int io_open(const char *path, int flags)
{
    int fd = open(path, flags);
    if (fd < 0)
        return -1;
    struct v4l2_capability cap;
    int r;
    do
        r = ioctl(fd, VIDIOC_QUERYCAP, &cap);
    while (r < 0 && errno == EINTR);
    if (r < 0) {
        close(fd);
        errno = ENOTTY;
        return -1;
    }
    pthread_once(&g_log_once, quiet_libv4l2);
    /* libv4l2's multi-planar plugin announces itself with printf(), which
     * would land among headless JSON lines.  Holding stdout's lock keeps
     * every other thread's stdio output out of the short window in which
     * descriptor 1 points at /dev/null. */
    int mplane = (cap.capabilities & (V4L2_CAP_VIDEO_CAPTURE_MPLANE | V4L2_CAP_VIDEO_OUTPUT_MPLANE)) != 0;
    int saved = -1;
    if (mplane) {
        flockfile(stdout);
        fflush(stdout);
        int nul = open("/dev/null", O_WRONLY | O_CLOEXEC);
        saved = nul >= 0 ? fcntl(1, F_DUPFD_CLOEXEC, 3) : -1;
        if (saved >= 0)
            dup2(nul, 1);
        if (nul >= 0)
            close(nul);
    }
    int v = v4l2_fd_open(fd, 0);
    int e0 = errno;
    if (mplane) {
        fflush(stdout);
        if (saved >= 0) {
            dup2(saved, 1);
            close(saved);
        }
        funlockfile(stdout);
    }
    errno = e0;
    if (v < 0) {
        int e = errno;
        close(fd);
        errno = e;
    }
    return v;
}
static int io_close(int fd) { return v4l2_close(fd); }
static int io_ioctl(int fd, unsigned long req, void *arg) { return v4l2_ioctl(fd, req, arg); }
static void *io_mmap(void *addr, size_t len, int prot, int flags, int fd, int64_t off)
{
    return v4l2_mmap(addr, len, prot, flags, fd, off);
}
static int io_munmap(void *addr, size_t len) { return v4l2_munmap(addr, len); }
static int io_stat(const char *path, struct stat *st) { return stat(path, st); }

const cap_v4l2_io cap_v4l2_io_default = {
    io_open, io_close, io_ioctl, io_mmap, io_munmap, io_stat,
};

/* Bounded string copy that always terminates (truncating is fine here). */
static void copy_str(char *dst, size_t n, const char *src)
{
    size_t k = strnlen(src, n - 1);
    memcpy(dst, src, k);
    dst[k] = 0;
}

/* ioctl that retries when a signal interrupted it. */
static int xioctl(const cap_v4l2_io *io, int fd, unsigned long req, void *arg)
{
    int r;
    do
        r = io->ioctl(fd, req, arg);
    while (r < 0 && errno == EINTR);
    return r;
}

/* ---- formats ----------------------------------------------------------- */

int cap_v4l2_format_cost(uint32_t fourcc)
{
    switch (fourcc) {
    case V4L2_PIX_FMT_YUYV:
    case V4L2_PIX_FMT_NV12:
        return 0;                  /* passed through, 1.5-2 bytes a pixel */
    case V4L2_PIX_FMT_RGB24:
    case V4L2_PIX_FMT_BGR24:
        return 1;                  /* passed through, 3 bytes a pixel     */
    case V4L2_PIX_FMT_UYVY:
    case V4L2_PIX_FMT_YVYU:
    case V4L2_PIX_FMT_NV21:
    case V4L2_PIX_FMT_YUV420:
    case V4L2_PIX_FMT_YVU420:
        return 2;                  /* reordered into YUYV or NV12 by us   */
    case V4L2_PIX_FMT_RGB565:
        return 2;                  /* one cheap libv4lconvert pass        */
    case V4L2_PIX_FMT_SBGGR8:
    case V4L2_PIX_FMT_SGBRG8:
    case V4L2_PIX_FMT_SGRBG8:
    case V4L2_PIX_FMT_SRGGB8:
        return 3;                  /* demosaic                            */
    case V4L2_PIX_FMT_MJPEG:
    case V4L2_PIX_FMT_JPEG:
        return 4;                  /* JPEG decode: the dearest per pixel  */
    case V4L2_PIX_FMT_GREY:
        return 5;                  /* cheap, but colour measures go blind */
    default:
        return -1;
    }
}

static coach_format repack_format(uint32_t fourcc);

int cap_v4l2_format_path(uint32_t fourcc)
{
    int cost = cap_v4l2_format_cost(fourcc);
    if (cost < 0)
        return -1;
    if (cost <= 1 || fourcc == V4L2_PIX_FMT_GREY)
        return 1;
    return repack_format(fourcc) != COACH_FMT_NONE ? 2 : 0;
}

/* The coach format a passed-through fourcc becomes; NONE when converted. */
static coach_format passthrough_format(uint32_t fourcc)
{
    switch (fourcc) {
    case V4L2_PIX_FMT_YUYV: return COACH_FMT_YUYV;
    case V4L2_PIX_FMT_NV12: return COACH_FMT_NV12;
    case V4L2_PIX_FMT_GREY: return COACH_FMT_GREY;
    case V4L2_PIX_FMT_RGB24: return COACH_FMT_RGB24;
    case V4L2_PIX_FMT_BGR24: return COACH_FMT_BGR24;
    default: return COACH_FMT_NONE;
    }
}

/* Y'CbCr layouts that differ from YUYV or NV12 only in byte order or
 * plane arrangement: reordered by us, so they keep the driver's matrix and
 * range (libv4lconvert would turn them into RGB as if they were full range). */
static coach_format repack_format(uint32_t fourcc)
{
    switch (fourcc) {
    case V4L2_PIX_FMT_UYVY:
    case V4L2_PIX_FMT_YVYU:
        return COACH_FMT_YUYV;
    case V4L2_PIX_FMT_NV21:
    case V4L2_PIX_FMT_YUV420:
    case V4L2_PIX_FMT_YVU420:
        return COACH_FMT_NV12;
    default:
        return COACH_FMT_NONE;
    }
}

/* Bytes per pixel of the first plane as the driver sends it (0: compressed). */
static int src_bpp(uint32_t fourcc)
{
    switch (fourcc) {
    case V4L2_PIX_FMT_YUYV: case V4L2_PIX_FMT_UYVY: case V4L2_PIX_FMT_YVYU: case V4L2_PIX_FMT_RGB565:
        return 2;
    case V4L2_PIX_FMT_RGB24: case V4L2_PIX_FMT_BGR24:
        return 3;
    case V4L2_PIX_FMT_MJPEG: case V4L2_PIX_FMT_JPEG:
        return 0;
    default:
        return 1;
    }
}

/* Reorders one frame into YUYV (out_stride = 2w) or NV12 (out_stride even,
 * the CbCr plane right after h rows). */
static void repack(uint32_t fourcc, int w, int h, uint32_t bpl, const uint8_t *src, uint8_t *dst, int out_stride)
{
    size_t os = (size_t)out_stride, ch = ((size_t)h + 1) / 2, pairs = ((size_t)w + 1) / 2;
    if (fourcc == V4L2_PIX_FMT_UYVY || fourcc == V4L2_PIX_FMT_YVYU) {
        int uyvy = fourcc == V4L2_PIX_FMT_UYVY;
        for (int y = 0; y < h; y++) {
            const uint8_t *s = src + (size_t)y * bpl;
            uint8_t *d = dst + (size_t)y * os;
            for (size_t x = 0; x < (size_t)w / 2; x++, s += 4, d += 4) {
                if (uyvy) { /* U Y0 V Y1 */
                    d[0] = s[1]; d[1] = s[0]; d[2] = s[3]; d[3] = s[2];
                } else {    /* Y0 V Y1 U */
                    d[0] = s[0]; d[1] = s[3]; d[2] = s[2]; d[3] = s[1];
                }
            }
        }
        return;
    }
    for (int y = 0; y < h; y++)
        memcpy(dst + (size_t)y * os, src + (size_t)y * bpl, (size_t)w);
    uint8_t *uv = dst + os * (size_t)h;
    const uint8_t *c = src + (size_t)bpl * (size_t)h;
    if (fourcc == V4L2_PIX_FMT_NV21) { /* CrCb pairs → CbCr */
        for (size_t y = 0; y < ch; y++)
            for (size_t x = 0; x < pairs; x++) {
                uv[y * os + 2 * x] = c[y * bpl + 2 * x + 1];
                uv[y * os + 2 * x + 1] = c[y * bpl + 2 * x];
            }
        return;
    }
    size_t cs = bpl / 2; /* planar 4:2:0: Cb then Cr (YU12), or Cr then Cb (YV12) */
    const uint8_t *cb = c, *cr = c + cs * ch;
    if (fourcc == V4L2_PIX_FMT_YVU420) {
        cr = c;
        cb = c + cs * ch;
    }
    for (size_t y = 0; y < ch; y++)
        for (size_t x = 0; x < pairs; x++) {
            uv[y * os + 2 * x] = cb[y * cs + x];
            uv[y * os + 2 * x + 1] = cr[y * cs + x];
        }
}

void cap_v4l2_colour(uint32_t colorspace, uint32_t ycbcr_enc, uint32_t quantization,
                     coach_matrix *matrix, coach_range *range)
{
    /* Defaults as the V4L2 specification's colorspace tables give them
     * (videodev2.h V4L2_MAP_*_DEFAULT): sRGB/JPEG → BT.601, Rec. 709 → 709;
     * JPEG full range, everything else limited. */
    uint32_t enc = ycbcr_enc == V4L2_YCBCR_ENC_DEFAULT ? V4L2_MAP_YCBCR_ENC_DEFAULT(colorspace) : ycbcr_enc;
    uint32_t q = quantization == V4L2_QUANTIZATION_DEFAULT
                     ? V4L2_MAP_QUANTIZATION_DEFAULT(0, colorspace, enc) : quantization;
    switch (enc) {
    case V4L2_YCBCR_ENC_709:
    case V4L2_YCBCR_ENC_XV709:
    case V4L2_YCBCR_ENC_SMPTE240M:
    case V4L2_YCBCR_ENC_BT2020:      /* the coach knows two matrices: 709 is the nearer */
    case V4L2_YCBCR_ENC_BT2020_CONST_LUM:
        *matrix = COACH_MATRIX_BT709;
        break;
    default:
        *matrix = COACH_MATRIX_BT601;
        break;
    }
    *range = q == V4L2_QUANTIZATION_FULL_RANGE ? COACH_RANGE_FULL : COACH_RANGE_LIMITED;
}

/* ---- modes ---------------------------------------------------------------- */

double cap_v4l2_mode_fps(const cap_v4l2_mode *m)
{
    if (m->nrates <= 0 || m->rates[0].num == 0)
        return 30.0;
    return (double)m->rates[0].den / m->rates[0].num;
}

static double rate_fps(cap_v4l2_rate r) { return r.num ? (double)r.den / r.num : 0.0; }

/* Frame rates of one format and size, fastest first.  0 or -errno. */
static void enum_rates(const cap_v4l2_io *io, int fd, cap_v4l2_mode *m)
{
    m->nrates = 0;
    m->rate_range = 0;
    for (uint32_t i = 0; m->nrates < CAP_V4L2_MAX_RATES; i++) {
        struct v4l2_frmivalenum fi;
        memset(&fi, 0, sizeof fi);
        fi.index = i;
        fi.pixel_format = m->fourcc;
        fi.width = (uint32_t)m->w;
        fi.height = (uint32_t)m->h;
        if (xioctl(io, fd, VIDIOC_ENUM_FRAMEINTERVALS, &fi) < 0)
            break;
        if (fi.type == V4L2_FRMIVAL_TYPE_DISCRETE) {
            if (fi.discrete.numerator == 0 || fi.discrete.denominator == 0)
                continue;
            cap_v4l2_rate r = {fi.discrete.numerator, fi.discrete.denominator};
            int k = m->nrates++;   /* insertion sort, fastest first */
            while (k > 0 && rate_fps(m->rates[k - 1]) < rate_fps(r)) {
                m->rates[k] = m->rates[k - 1];
                k--;
            }
            m->rates[k] = r;
        } else {
            if (fi.stepwise.min.numerator == 0 || fi.stepwise.max.numerator == 0)
                break;
            m->rates[0] = (cap_v4l2_rate){fi.stepwise.min.numerator, fi.stepwise.min.denominator};
            m->rates[1] = (cap_v4l2_rate){fi.stepwise.max.numerator, fi.stepwise.max.denominator};
            m->nrates = 2;
            m->rate_range = 1;
            break;
        }
    }
}

static int add_mode(const cap_v4l2_io *io, int fd, cap_v4l2_mode *modes, int n, int max,
                    const struct v4l2_fmtdesc *fd_desc, int w, int h)
{
    if (n >= max || w <= 0 || h <= 0)
        return n;
    for (int i = 0; i < n; i++)
        if (modes[i].fourcc == fd_desc->pixelformat && modes[i].w == w && modes[i].h == h)
            return n;
    cap_v4l2_mode *m = &modes[n];
    memset(m, 0, sizeof *m);
    m->fourcc = fd_desc->pixelformat;
    snprintf(m->desc, sizeof m->desc, "%s", (const char *)fd_desc->description);
    m->w = w;
    m->h = h;
    enum_rates(io, fd, m);
    return n + 1;
}

/* Sizes worth trying on a camera with a continuous or stepwise size range. */
static const int k_common_sizes[][2] = {
    {1920, 1080}, {1280, 720}, {1024, 768}, {800, 600}, {640, 480}, {640, 360}, {320, 240},
};

int cap_v4l2_enum_modes(const cap_v4l2_io *io, int fd, cap_v4l2_mode *modes, int max)
{
    int n = 0;
    for (uint32_t fi = 0;; fi++) {
        struct v4l2_fmtdesc d;
        memset(&d, 0, sizeof d);
        d.index = fi;
        d.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
        if (xioctl(io, fd, VIDIOC_ENUM_FMT, &d) < 0) {
            if (errno == EINVAL || fi > 0)
                break;
            return -errno;
        }
        if ((d.flags & V4L2_FMT_FLAG_EMULATED) || cap_v4l2_format_cost(d.pixelformat) < 0)
            continue;
        int nsizes = 0;
        for (uint32_t si = 0;; si++) {
            struct v4l2_frmsizeenum fs;
            memset(&fs, 0, sizeof fs);
            fs.index = si;
            fs.pixel_format = d.pixelformat;
            if (xioctl(io, fd, VIDIOC_ENUM_FRAMESIZES, &fs) < 0)
                break;
            nsizes++;
            if (fs.type == V4L2_FRMSIZE_TYPE_DISCRETE) {
                n = add_mode(io, fd, modes, n, max, &d, (int)fs.discrete.width, (int)fs.discrete.height);
                continue;
            }
            const struct v4l2_frmsize_stepwise *sw = &fs.stepwise;
            uint32_t sx = sw->step_width ? sw->step_width : 1, sy = sw->step_height ? sw->step_height : 1;
            for (size_t k = 0; k < sizeof k_common_sizes / sizeof k_common_sizes[0]; k++) {
                uint32_t w = (uint32_t)k_common_sizes[k][0], h = (uint32_t)k_common_sizes[k][1];
                if (w < sw->min_width || w > sw->max_width || h < sw->min_height || h > sw->max_height ||
                    (w - sw->min_width) % sx || (h - sw->min_height) % sy)
                    continue;
                n = add_mode(io, fd, modes, n, max, &d, (int)w, (int)h);
            }
            if (sw->max_width <= 1920 && sw->max_height <= 1080)
                n = add_mode(io, fd, modes, n, max, &d, (int)sw->max_width, (int)sw->max_height);
            break;
        }
        if (nsizes == 0) {
            /* No size enumeration: ask for the usual Full HD and take what the
             * driver answers, with the current rate. */
            struct v4l2_format f;
            memset(&f, 0, sizeof f);
            f.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
            f.fmt.pix.width = 1920;
            f.fmt.pix.height = 1080;
            f.fmt.pix.pixelformat = d.pixelformat;
            f.fmt.pix.field = V4L2_FIELD_ANY;
            if (xioctl(io, fd, VIDIOC_TRY_FMT, &f) == 0 && f.fmt.pix.pixelformat == d.pixelformat) {
                int before = n;
                n = add_mode(io, fd, modes, n, max, &d, (int)f.fmt.pix.width, (int)f.fmt.pix.height);
                struct v4l2_streamparm p;
                memset(&p, 0, sizeof p);
                p.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
                if (n > before && modes[before].nrates == 0 && xioctl(io, fd, VIDIOC_G_PARM, &p) == 0 &&
                    p.parm.capture.timeperframe.numerator && p.parm.capture.timeperframe.denominator) {
                    modes[before].rates[0] = (cap_v4l2_rate){p.parm.capture.timeperframe.numerator,
                                                             p.parm.capture.timeperframe.denominator};
                    modes[before].nrates = 1;
                }
            }
        }
    }
    return n;
}

/* ---- choosing --------------------------------------------------------------- */

#define CAP_MAX_DEFAULT_W 1920
#define CAP_MAX_DEFAULT_H 1080
#define CAP_MIN_DEFAULT_FPS 25.0
#define CAP_DEFAULT_FPS 30.0

static int size_allowed(const cap_v4l2_want *want, const cap_v4l2_mode *m)
{
    return !want->fourcc || m->fourcc == want->fourcc;
}

int cap_v4l2_choose(const cap_v4l2_mode *modes, int n, const cap_v4l2_want *want, cap_v4l2_pick *out)
{
    double target = want->fps > 0 ? want->fps : CAP_DEFAULT_FPS;
    int bw = 0, bh = 0, found = 0;

    if (want->w > 0 && want->h > 0) {
        /* The wanted size, else the nearest one (sum of the side differences). */
        long best = LONG_MAX;
        for (int i = 0; i < n; i++) {
            if (!size_allowed(want, &modes[i]))
                continue;
            long d = labs((long)modes[i].w - want->w) + labs((long)modes[i].h - want->h);
            long area = (long)modes[i].w * modes[i].h, barea = (long)bw * bh;
            if (d < best || (d == best && area > barea)) {
                best = d;
                bw = modes[i].w;
                bh = modes[i].h;
                found = 1;
            }
        }
    } else {
        /* Largest within Full HD that reaches 25 fps; else the fastest
         * within Full HD; else the smallest there is. */
        double min_fps = want->fps > 0 ? fmin(want->fps, CAP_MIN_DEFAULT_FPS) : CAP_MIN_DEFAULT_FPS;
        long barea = -1;
        for (int i = 0; i < n; i++) {
            const cap_v4l2_mode *m = &modes[i];
            long area = (long)m->w * m->h;
            if (size_allowed(want, m) && m->w <= CAP_MAX_DEFAULT_W && m->h <= CAP_MAX_DEFAULT_H &&
                cap_v4l2_mode_fps(m) >= min_fps - 1e-6 && area > barea) {
                barea = area;
                bw = m->w;
                bh = m->h;
                found = 1;
            }
        }
        if (!found) {
            double bfps = -1;
            for (int i = 0; i < n; i++) {
                const cap_v4l2_mode *m = &modes[i];
                long area = (long)m->w * m->h;
                double f = cap_v4l2_mode_fps(m);
                if (size_allowed(want, m) && m->w <= CAP_MAX_DEFAULT_W && m->h <= CAP_MAX_DEFAULT_H &&
                    (f > bfps + 1e-6 || (fabs(f - bfps) <= 1e-6 && area > barea))) {
                    bfps = f;
                    barea = area;
                    bw = m->w;
                    bh = m->h;
                    found = 1;
                }
            }
        }
        if (!found) {
            for (int i = 0; i < n; i++) {
                long area = (long)modes[i].w * modes[i].h;
                if (size_allowed(want, &modes[i]) && (!found || area < barea)) {
                    barea = area;
                    bw = modes[i].w;
                    bh = modes[i].h;
                    found = 1;
                }
            }
        }
    }
    if (!found)
        return -ENOENT;

    /* The cheapest format at that size that reaches the rate (or 25 fps
     * when more is asked); when none does, the fastest. */
    double need = fmin(target, CAP_MIN_DEFAULT_FPS);
    int best = -1;
    for (int i = 0; i < n; i++) {
        const cap_v4l2_mode *m = &modes[i];
        if (!size_allowed(want, m) || m->w != bw || m->h != bh)
            continue;
        if (best < 0) {
            best = i;
            continue;
        }
        const cap_v4l2_mode *b = &modes[best];
        double fm = cap_v4l2_mode_fps(m), fb = cap_v4l2_mode_fps(b);
        int okm = fm >= need - 1e-6, okb = fb >= need - 1e-6;
        int cm = cap_v4l2_format_cost(m->fourcc), cb = cap_v4l2_format_cost(b->fourcc);
        if (okm != okb ? okm : okm ? (cm < cb || (cm == cb && fm > fb)) : (fm > fb || (fm == fb && cm < cb)))
            best = i;
    }
    if (best < 0)
        return -ENOENT;

    const cap_v4l2_mode *m = &modes[best];
    out->mode = best;
    if (m->nrates == 0) {
        out->rate = (cap_v4l2_rate){0, 0}; /* leave the driver's rate */
    } else if (m->rate_range) {
        double hi = rate_fps(m->rates[0]), lo = rate_fps(m->rates[1]);
        double f = fmax(lo, fmin(hi, target));
        out->rate = (cap_v4l2_rate){1000, (uint32_t)lround(f * 1000)};
    } else {
        int bi = 0;
        for (int i = 1; i < m->nrates; i++) {
            double d = fabs(rate_fps(m->rates[i]) - target), db = fabs(rate_fps(m->rates[bi]) - target);
            if (d < db - 1e-9)  /* rates are fastest first: ties keep the faster */
                bi = i;
        }
        out->rate = m->rates[bi];
    }
    return 0;
}

/* ---- error lines ------------------------------------------------------------- */

void cap_v4l2_describe_error(char *buf, size_t n, const char *dev, const char *stage, int errnum)
{
    const char *cause;
    char other[96];
    switch (errnum) {
    case ENOENT:
        cause = "no such device (is the camera plugged in? 'vfcoach --list' shows the cameras)";
        break;
    case ENODEV:
    case ENXIO:
        cause = "no device behind this node (unplugged, or its driver went away)";
        break;
    case EACCES:
    case EPERM:
        cause = "permission denied: join the 'video' group (sudo usermod -aG video $USER, then log in "
                "again) or install vfcoach's udev rule (sudo make install)";
        break;
    case EBUSY:
        cause = "busy: another program is using this camera; close it and try again";
        break;
    case ENOTTY:
        cause = "not a V4L2 video device";
        break;
    case EISDIR:
        cause = "is a directory, not a camera";
        break;
    case ENOSPC:
        cause = "not enough USB bandwidth: try a smaller --size or --fps, or another USB port";
        break;
    case ENOMEM:
        cause = "out of memory for the capture buffers (try a smaller --size)";
        break;
    case EIO:
        cause = "input/output error (check the cable and the USB port)";
        break;
    case EINVAL:
        cause = "the driver refused the request";
        break;
    default:
        snprintf(other, sizeof other, "%s", strerror(errnum));
        cause = other;
        break;
    }
    snprintf(buf, n, "%s: cannot %s: %s", dev, stage, cause);
}

/* ---- libv4lconvert over the seam ------------------------------------------- */

struct cap_v4l2_conv {
    struct v4lconvert_data *d;
    const cap_v4l2_io *io;
};

static void *conv_init(int fd)
{
    (void)fd;
    return NULL;
}
static void conv_close(void *priv) { (void)priv; }
static int conv_ioctl(void *priv, int fd, unsigned long req, void *arg)
{
    const cap_v4l2_conv *c = priv;
    return c->io->ioctl(fd, req, arg);
}
static ssize_t conv_read(void *priv, int fd, void *buf, size_t n)
{
    (void)priv;
    return read(fd, buf, n);
}
static ssize_t conv_write(void *priv, int fd, const void *buf, size_t n)
{
    (void)priv;
    return write(fd, buf, n);
}
static const struct libv4l_dev_ops k_conv_ops = {
    .init = conv_init, .close = conv_close, .ioctl = conv_ioctl, .read = conv_read, .write = conv_write,
};

cap_v4l2_conv *cap_v4l2_conv_create(const cap_v4l2_io *io, int fd)
{
    cap_v4l2_conv *c = calloc(1, sizeof *c);
    if (!c)
        return NULL;
    c->io = io;
    c->d = v4lconvert_create_with_dev_ops(fd, c, &k_conv_ops);
    if (!c->d) {
        free(c);
        return NULL;
    }
    return c;
}

void cap_v4l2_conv_destroy(cap_v4l2_conv *c)
{
    if (!c)
        return;
    v4lconvert_destroy(c->d);
    free(c);
}

int cap_v4l2_conv_rgb24(cap_v4l2_conv *c, uint32_t fourcc, int w, int h, uint32_t bytesperline,
                        uint32_t sizeimage, const uint8_t *src, size_t srclen, uint8_t *dst, size_t dstlen)
{
    struct v4l2_format sf, df;
    memset(&sf, 0, sizeof sf);
    sf.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
    sf.fmt.pix.width = (uint32_t)w;
    sf.fmt.pix.height = (uint32_t)h;
    sf.fmt.pix.pixelformat = fourcc;
    sf.fmt.pix.field = V4L2_FIELD_NONE;
    sf.fmt.pix.bytesperline = bytesperline;
    sf.fmt.pix.sizeimage = sizeimage;
    df = sf;
    df.fmt.pix.pixelformat = V4L2_PIX_FMT_RGB24;
    df.fmt.pix.bytesperline = (uint32_t)w * 3;
    df.fmt.pix.sizeimage = (uint32_t)w * 3 * (uint32_t)h;
    if (dstlen < df.fmt.pix.sizeimage || srclen > INT_MAX)
        return -EINVAL;
    int r = v4lconvert_convert(c->d, &sf, &df, (unsigned char *)src, (int)srclen, dst, (int)dstlen);
    if (r < 0)
        return errno ? -errno : -EIO;
    return r;
}

/* ---- the source ------------------------------------------------------------ */

#define CAP_V4L2_NBUF 4

typedef struct v4l2_src {
    cap_source base;
    const cap_v4l2_io *io;
    int fd;
    char node[64];                 /* the node streaming now             */
    cap_dev_id id;                 /* who we wait for after an unplug    */
    cap_v4l2_want want;            /* after the first start: the mode in use */
    uint32_t fourcc;
    int w, h;
    uint32_t bpl, sizeimage;
    cap_v4l2_rate rate;
    coach_format outfmt;           /* NONE: converted to RGB24           */
    int repack;                    /* 1: reordered into YUYV/NV12 by us  */
    int out_stride;                /* bytes per row of the frame we hand on */
    size_t in_bytes;               /* bytes a whole driver frame needs (uncompressed) */
    coach_matrix matrix;
    coach_range range;
    size_t out_bytes;
    struct { void *start; size_t len; } bufs[CAP_V4L2_NBUF];
    int nbufs;
    int streaming;
    cap_v4l2_conv *conv;
    uint64_t seq;
} v4l2_src;

static void stream_close(v4l2_src *v)
{
    const cap_v4l2_io *io = v->io;
    if (v->fd >= 0 && v->streaming) {
        int type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
        xioctl(io, v->fd, VIDIOC_STREAMOFF, &type);
    }
    v->streaming = 0;
    for (int i = 0; i < v->nbufs; i++)
        if (v->bufs[i].start && v->bufs[i].start != MAP_FAILED)
            io->munmap(v->bufs[i].start, v->bufs[i].len);
    if (v->fd >= 0 && v->nbufs > 0) {
        struct v4l2_requestbuffers rb;
        memset(&rb, 0, sizeof rb);
        rb.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
        rb.memory = V4L2_MEMORY_MMAP;
        xioctl(io, v->fd, VIDIOC_REQBUFS, &rb); /* fails on a gone device: nothing to free then */
    }
    memset(v->bufs, 0, sizeof v->bufs);
    v->nbufs = 0;
    cap_v4l2_conv_destroy(v->conv);
    v->conv = NULL;
    if (v->fd >= 0)
        io->close(v->fd);
    v->fd = -1;
}

/* Opens a node and checks it is a camera.  Returns 0, or a negative errno
 * with one line in err. */
static int node_open(const cap_v4l2_io *io, const char *node, int *fd_out, struct v4l2_capability *cap,
                     char *err, size_t errlen)
{
    struct stat st;
    if (io->stat(node, &st) < 0) {
        int e = errno;
        cap_v4l2_describe_error(err, errlen, node, "open", e);
        return -e;
    }
    if (S_ISDIR(st.st_mode)) {
        cap_v4l2_describe_error(err, errlen, node, "open", EISDIR);
        return -EISDIR;
    }
    if (!S_ISCHR(st.st_mode)) {
        snprintf(err, errlen, "%s: cannot open: not a device node, so not a camera", node);
        return -ENOTTY;
    }
    int fd = io->open(node, O_RDWR | O_NONBLOCK | O_CLOEXEC);
    if (fd < 0) {
        int e = errno;
        cap_v4l2_describe_error(err, errlen, node, "open", e);
        return -e;
    }
    memset(cap, 0, sizeof *cap);
    if (xioctl(io, fd, VIDIOC_QUERYCAP, cap) < 0) {
        int e = errno == EINVAL ? ENOTTY : errno;
        cap_v4l2_describe_error(err, errlen, node, "query the device", e);
        io->close(fd);
        return -e;
    }
    uint32_t caps = (cap->capabilities & V4L2_CAP_DEVICE_CAPS) ? cap->device_caps : cap->capabilities;
    if (!(caps & V4L2_CAP_VIDEO_CAPTURE)) {
        if (caps & V4L2_CAP_VIDEO_CAPTURE_MPLANE)
            snprintf(err, errlen, "%s: cannot use: a multi-planar camera, and libv4l2's plugin for "
                     "those did not load (is libv4l-0 installed?)", node);
        else
            snprintf(err, errlen, "%s: cannot use: a V4L2 node without video capture (%s) — "
                     "'vfcoach --list' shows the cameras", node,
                     (caps & V4L2_CAP_META_CAPTURE) ? "metadata" :
                     (caps & (V4L2_CAP_VIDEO_OUTPUT | V4L2_CAP_VIDEO_OUTPUT_MPLANE)) ? "video output" : "other");
        io->close(fd);
        return -ENOTTY;
    }
    if (!(caps & V4L2_CAP_STREAMING)) {
        snprintf(err, errlen, "%s: cannot use: the driver offers no streaming I/O", node);
        io->close(fd);
        return -ENOTTY;
    }
    *fd_out = fd;
    return 0;
}

/* Sets the format and rate, maps buffers and starts streaming on v->fd.
 * max_bytes: 0 on the first start, else the mailbox capacity a restart must
 * fit in. */
static int stream_start(v4l2_src *v, size_t max_bytes, char *err, size_t errlen)
{
    const cap_v4l2_io *io = v->io;
    cap_v4l2_mode *modes = calloc(CAP_V4L2_MAX_MODES, sizeof *modes);
    if (!modes) {
        cap_v4l2_describe_error(err, errlen, v->node, "list formats", ENOMEM);
        return -ENOMEM;
    }
    /* A restart after a replug asks for the mode it had straight away;
     * enumerating every format, size and rate again costs hundreds of
     * ioctls for nothing. */
    int again = max_bytes && v->want.fourcc && v->want.w > 0 && v->want.h > 0 && v->rate.num;
    int n = again ? 1 : cap_v4l2_enum_modes(io, v->fd, modes, CAP_V4L2_MAX_MODES);
    if (again) {
        modes[0] = (cap_v4l2_mode){.fourcc = v->want.fourcc, .w = v->want.w, .h = v->want.h, .nrates = 1};
        modes[0].rates[0] = v->rate;
    }
    if (n < 0) {
        cap_v4l2_describe_error(err, errlen, v->node, "list formats", -n);
        free(modes);
        return n;
    }
    if (n == 0) {
        snprintf(err, errlen, "%s: cannot use: the camera offers no pixel format vfcoach can read", v->node);
        free(modes);
        return -ENOTSUP;
    }
    cap_v4l2_pick pick;
    if (cap_v4l2_choose(modes, n, &v->want, &pick) < 0) {
        char cc[5] = {0};
        memcpy(cc, &v->want.fourcc, 4);
        snprintf(err, errlen, "%s: cannot use: the camera does not offer the pixel format %s", v->node, cc);
        free(modes);
        return -ENOENT;
    }
    cap_v4l2_mode m = modes[pick.mode];
    free(modes);

    struct v4l2_format f;
    memset(&f, 0, sizeof f);
    f.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
    f.fmt.pix.width = (uint32_t)m.w;
    f.fmt.pix.height = (uint32_t)m.h;
    f.fmt.pix.pixelformat = m.fourcc;
    f.fmt.pix.field = V4L2_FIELD_NONE;
    if (xioctl(io, v->fd, VIDIOC_S_FMT, &f) < 0) {
        int e = errno;
        cap_v4l2_describe_error(err, errlen, v->node, "set the format", e);
        return -e;
    }
    if (cap_v4l2_format_cost(f.fmt.pix.pixelformat) < 0 || f.fmt.pix.width == 0 || f.fmt.pix.height == 0 ||
        f.fmt.pix.width > 16384 || f.fmt.pix.height > 16384) {
        snprintf(err, errlen, "%s: cannot use: the driver answered with a format vfcoach cannot read", v->node);
        return -ENOTSUP;
    }
    v->fourcc = f.fmt.pix.pixelformat;
    v->w = (int)f.fmt.pix.width;
    v->h = (int)f.fmt.pix.height;
    v->outfmt = passthrough_format(v->fourcc);
    v->repack = v->outfmt == COACH_FMT_NONE && repack_format(v->fourcc) != COACH_FMT_NONE;
    if (v->repack)
        v->outfmt = repack_format(v->fourcc);
    uint32_t minbpl = (uint32_t)v->w * (uint32_t)src_bpp(v->fourcc);
    v->bpl = f.fmt.pix.bytesperline >= minbpl ? f.fmt.pix.bytesperline : minbpl;
    v->sizeimage = f.fmt.pix.sizeimage;
    cap_v4l2_colour(f.fmt.pix.colorspace, f.fmt.pix.ycbcr_enc, f.fmt.pix.quantization, &v->matrix, &v->range);
    size_t ch = ((size_t)v->h + 1) / 2; /* chroma rows of 4:2:0 formats */
    if (v->outfmt != COACH_FMT_NONE && !v->repack) {
        v->out_stride = (int)v->bpl;
        v->out_bytes = v->in_bytes = (size_t)v->bpl * (v->outfmt == COACH_FMT_NV12 ? (size_t)v->h + ch : (size_t)v->h);
    } else if (v->outfmt == COACH_FMT_YUYV) {
        v->out_stride = v->w * 2;
        v->out_bytes = (size_t)v->out_stride * (size_t)v->h;
        v->in_bytes = (size_t)v->bpl * (size_t)v->h;
    } else if (v->outfmt == COACH_FMT_NV12) {
        v->out_stride = (v->w + 1) & ~1;
        v->out_bytes = (size_t)v->out_stride * ((size_t)v->h + ch);
        v->in_bytes = v->fourcc == V4L2_PIX_FMT_NV21 ? (size_t)v->bpl * ((size_t)v->h + ch)
                                                     : (size_t)v->bpl * (size_t)v->h + 2 * (size_t)(v->bpl / 2) * ch;
    } else {
        v->out_stride = v->w * 3;
        v->out_bytes = (size_t)v->w * (size_t)v->h * 3;
        v->in_bytes = 0;
        v->conv = cap_v4l2_conv_create(io, v->fd);
        if (!v->conv) {
            snprintf(err, errlen, "%s: cannot start the libv4lconvert converter", v->node);
            return -ENOMEM;
        }
    }
    if (max_bytes && v->out_bytes > max_bytes) {
        snprintf(err, errlen, "%s: came back with larger frames than before (%dx%d)", v->node, v->w, v->h);
        return -EMSGSIZE;
    }

    if (pick.rate.num && pick.rate.den) {
        struct v4l2_streamparm p;
        memset(&p, 0, sizeof p);
        p.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
        p.parm.capture.timeperframe.numerator = pick.rate.num;
        p.parm.capture.timeperframe.denominator = pick.rate.den;
        xioctl(io, v->fd, VIDIOC_S_PARM, &p); /* a driver without rate control keeps its own */
    }
    struct v4l2_streamparm p;
    memset(&p, 0, sizeof p);
    p.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
    if (xioctl(io, v->fd, VIDIOC_G_PARM, &p) == 0 && p.parm.capture.timeperframe.numerator &&
        p.parm.capture.timeperframe.denominator)
        v->rate = (cap_v4l2_rate){p.parm.capture.timeperframe.numerator, p.parm.capture.timeperframe.denominator};
    else
        v->rate = pick.rate.num ? pick.rate : (cap_v4l2_rate){1, 30};

    struct v4l2_requestbuffers rb;
    memset(&rb, 0, sizeof rb);
    rb.count = CAP_V4L2_NBUF;
    rb.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
    rb.memory = V4L2_MEMORY_MMAP;
    if (xioctl(io, v->fd, VIDIOC_REQBUFS, &rb) < 0) {
        int e = errno;
        cap_v4l2_describe_error(err, errlen, v->node, "get capture buffers", e);
        return -e;
    }
    if (rb.count < 2) {
        snprintf(err, errlen, "%s: cannot stream: the driver gave %u buffer(s), 2 are needed", v->node, rb.count);
        v->nbufs = (int)rb.count; /* freed by stream_close */
        return -ENOMEM;
    }
    v->nbufs = (int)(rb.count < CAP_V4L2_NBUF ? rb.count : CAP_V4L2_NBUF);
    for (int i = 0; i < v->nbufs; i++) {
        struct v4l2_buffer b;
        memset(&b, 0, sizeof b);
        b.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
        b.memory = V4L2_MEMORY_MMAP;
        b.index = (uint32_t)i;
        if (xioctl(io, v->fd, VIDIOC_QUERYBUF, &b) < 0) {
            int e = errno;
            cap_v4l2_describe_error(err, errlen, v->node, "map capture buffers", e);
            return -e;
        }
        void *start = io->mmap(NULL, b.length, PROT_READ | PROT_WRITE, MAP_SHARED, v->fd, b.m.offset);
        if (start == MAP_FAILED) {
            int e = errno;
            cap_v4l2_describe_error(err, errlen, v->node, "map capture buffers", e);
            return -e;
        }
        v->bufs[i].start = start;
        v->bufs[i].len = b.length;
        if (xioctl(io, v->fd, VIDIOC_QBUF, &b) < 0) {
            int e = errno;
            cap_v4l2_describe_error(err, errlen, v->node, "queue capture buffers", e);
            return -e;
        }
    }
    int type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
    if (xioctl(io, v->fd, VIDIOC_STREAMON, &type) < 0) {
        int e = errno;
        cap_v4l2_describe_error(err, errlen, v->node, "start streaming", e);
        return -e;
    }
    v->streaming = 1;
    /* A restart after an unplug asks for exactly this mode again. */
    v->want = (cap_v4l2_want){.w = v->w, .h = v->h, .fps = rate_fps(v->rate), .fourcc = v->fourcc};
    return 0;
}

/* One line for cap_thread_status(), truncated to fit. */
__attribute__((format(printf, 2, 3))) static void set_note(v4l2_src *v, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(v->base.note, sizeof v->base.note, fmt, ap);
    va_end(ap);
}

static int v4l2_poll_fd(cap_source *s)
{
    return ((v4l2_src *)s)->fd;
}

static double now_monotonic(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + ts.tv_nsec * 1e-9;
}

static int v4l2_produce(cap_source *s, cap_mailbox *mb, cap_frame *meta)
{
    v4l2_src *v = (v4l2_src *)s;
    const cap_v4l2_io *io = v->io;
    if (v->fd < 0 || !v->streaming)
        return -ENODEV;
    struct v4l2_buffer b;
    memset(&b, 0, sizeof b);
    b.type = V4L2_BUF_TYPE_VIDEO_CAPTURE;
    b.memory = V4L2_MEMORY_MMAP;
    if (xioctl(io, v->fd, VIDIOC_DQBUF, &b) < 0) {
        int e = errno;
        if (e == EAGAIN) {
            /* An unregistered node polls as POLLERR|POLLHUP while DQBUF may
             * still say "nothing yet"; POLLHUP only ever means gone. */
            struct pollfd p = {.fd = v->fd, .events = POLLIN};
            if (poll(&p, 1, 0) == 1 && (p.revents & POLLHUP)) {
                set_note(v, "%s: camera unplugged or gone: "
                         "waiting for the same camera to come back", v->base.name);
                return -ENODEV;
            }
            return -EAGAIN;
        }
        if (e == ENODEV || e == EIO || e == ENXIO) {
            set_note(v, "%s: camera unplugged or gone (%s): "
                     "waiting for the same camera to come back", v->base.name, strerror(e));
            return -ENODEV;
        }
        return -e;
    }
    int rc = 0;
    if (b.index >= (uint32_t)v->nbufs) {
        rc = -EIO;
        goto requeue;
    }
    if (b.flags & V4L2_BUF_FLAG_ERROR) {
        rc = -EAGAIN;
        goto requeue;
    }
    const uint8_t *src = v->bufs[b.index].start;
    size_t used = b.bytesused ? b.bytesused : v->bufs[b.index].len;
    if (used > v->bufs[b.index].len)
        used = v->bufs[b.index].len;
    uint8_t *dst = cap_mailbox_begin(mb, v->out_bytes);
    if (!dst) {
        rc = -EMSGSIZE;
        goto requeue;
    }
    memset(meta, 0, sizeof *meta);
    if (v->outfmt != COACH_FMT_NONE) {
        if (used < v->in_bytes) { /* a short frame: the driver's problem, skip it */
            rc = -EAGAIN;
            goto requeue;
        }
        if (v->repack)
            repack(v->fourcc, v->w, v->h, v->bpl, src, dst, v->out_stride);
        else
            memcpy(dst, src, v->out_bytes);
        meta->view.format = v->outfmt;
        meta->view.stride = v->out_stride;
    } else {
        int r = cap_v4l2_conv_rgb24(v->conv, v->fourcc, v->w, v->h, v->bpl, v->sizeimage, src, used, dst,
                                    v->out_bytes);
        if (r < 0) {       /* a corrupt JPEG frame happens on busy USB buses: skip it */
            rc = -EAGAIN;
            goto requeue;
        }
        meta->view.format = COACH_FMT_RGB24;
        meta->view.stride = v->w * 3;
    }
    meta->view.data = dst;
    meta->view.data2 = NULL;
    meta->view.w = v->w;
    meta->view.h = v->h;
    meta->view.matrix = v->matrix;
    meta->view.range = v->range;
    meta->seq = v->seq++;
    if ((b.flags & V4L2_BUF_FLAG_TIMESTAMP_MASK) == V4L2_BUF_FLAG_TIMESTAMP_MONOTONIC &&
        (b.timestamp.tv_sec || b.timestamp.tv_usec))
        meta->t_capture = (double)b.timestamp.tv_sec + b.timestamp.tv_usec * 1e-6;
    else
        meta->t_capture = now_monotonic();
requeue:
    if (xioctl(io, v->fd, VIDIOC_QBUF, &b) < 0 && rc == 0) {
        int e = errno;
        if (e == ENODEV || e == EIO || e == ENXIO)
            rc = -ENODEV; /* this frame is still good; the next produce() reports the loss */
    }
    return rc == -ENODEV ? 0 : rc;
}

/* ---- finding the same camera again ------------------------------------ */

int cap_v4l2_query(const cap_v4l2_io *io, const char *node, cap_dev_id *id, uint32_t *caps, int *fd_out,
                   char *err, size_t errlen)
{
    struct v4l2_capability cap;
    int fd = -1;
    int r = node_open(io, node, &fd, &cap, err, errlen);
    if (r < 0)
        return r;
    if (caps)
        *caps = (cap.capabilities & V4L2_CAP_DEVICE_CAPS) ? cap.device_caps : cap.capabilities;
    snprintf(id->driver, sizeof id->driver, "%s", (const char *)cap.driver);
    snprintf(id->card, sizeof id->card, "%s", (const char *)cap.card);
    snprintf(id->bus, sizeof id->bus, "%s", (const char *)cap.bus_info);
    if (fd_out)
        *fd_out = fd;
    else
        io->close(fd);
    return 0;
}

/* One pass over the nodes: reopens the camera when it is back.  0 when
 * streaming again, -EAGAIN when not (yet), other -errno when it came back
 * but cannot stream as before. */
static int try_reopen(v4l2_src *v)
{
    char nodes[64][64];
    int n = cap_dev_nodes(nodes, 64);
    for (int i = 0; i < n; i++) {
        cap_dev_id have;
        if (cap_dev_identify(nodes[i], &have) < 0)
            continue;
        /* Without a card name yet: the udev/sysfs keys decide when there are any. */
        if ((v->id.parent[0] || v->id.id_path[0] || v->id.serial[0]) && !cap_dev_match(&v->id, &have))
            continue;
        int fd = -1;
        char err[256];
        if (cap_v4l2_query(v->io, nodes[i], &have, NULL, &fd, err, sizeof err) < 0)
            continue;
        if (!cap_dev_match(&v->id, &have)) {
            v->io->close(fd);
            continue;
        }
        v->fd = fd;
        copy_str(v->node, sizeof v->node, nodes[i]);
        int r = stream_start(v, v->base.max_bytes, err, sizeof err);
        if (r < 0) {
            stream_close(v);
            return (r == -EBUSY || r == -ENODEV || r == -ENOENT || r == -EIO) ? -EAGAIN : r;
        }
        char was[sizeof v->base.name];
        copy_str(was, sizeof was, v->base.name);
        snprintf(v->base.name, sizeof v->base.name, "%s (%s)", have.card, v->node);
        if (strcmp(was, v->base.name))
            set_note(v, "%s: camera back (it was %s), streaming again",
                     v->base.name, was);
        else
            set_note(v, "%s: camera back, streaming again", v->base.name);
        return 0;
    }
    return -EAGAIN;
}

static int v4l2_recover(cap_source *s, int stop_fd)
{
    v4l2_src *v = (v4l2_src *)s;
    /* Watch before closing: the node may come back the moment our last
     * descriptor goes (vivid does), and that event must not be missed. */
    cap_dev_watch *w = cap_dev_watch_create();
    stream_close(v);
    int rc;
    for (;;) {
        rc = try_reopen(v);
        if (rc != -EAGAIN)
            break;
        struct pollfd p[2] = {{.fd = stop_fd, .events = POLLIN}, {.fd = w ? cap_dev_watch_fd(w) : -1, .events = POLLIN}};
        /* Rescan every second as well: an event can be missed (no udev
         * daemon, a full socket buffer), a rescan cannot. */
        int pr = poll(p, 2, 1000);
        if (pr < 0 && errno != EINTR) {
            rc = -errno;
            break;
        }
        if (p[0].revents) {
            rc = -ECANCELED;
            break;
        }
        if (w && (p[1].revents & POLLIN))
            cap_dev_watch_drain(w);
    }
    cap_dev_watch_destroy(w);
    return rc;
}

static void v4l2_destroy(cap_source *s)
{
    v4l2_src *v = (v4l2_src *)s;
    stream_close(v);
    free(v);
}

static const cap_source_ops k_v4l2_ops = {
    .poll_fd = v4l2_poll_fd,
    .produce = v4l2_produce,
    .recover = v4l2_recover,
    .destroy = v4l2_destroy,
};

uint32_t cap_v4l2_source_fourcc(const cap_source *s)
{
    return s && s->ops == &k_v4l2_ops ? ((const v4l2_src *)s)->fourcc : 0;
}

/* "NAME@FOURCC" asks for a pixel format; splits it off. */
static uint32_t split_fourcc(const char *spec, char *base, size_t n)
{
    copy_str(base, n, spec);
    char *at = strrchr(base, '@');
    if (!at || strlen(at + 1) < 2 || strlen(at + 1) > 4 || strchr(at + 1, '/'))
        return 0;
    char cc[4] = {' ', ' ', ' ', ' '};
    for (int i = 0; at[1 + i]; i++)
        cc[i] = (char)((at[1 + i] >= 'a' && at[1 + i] <= 'z') ? at[1 + i] - 32 : at[1 + i]);
    *at = 0;
    return v4l2_fourcc(cc[0], cc[1], cc[2], cc[3]);
}

cap_source *cap_v4l2_open_io(const cap_v4l2_io *io, const char *dev, const cap_source_opts *o,
                             char *err, size_t errlen)
{
    char node[sizeof ((v4l2_src *)0)->node];
    uint32_t fourcc = split_fourcc(dev, node, sizeof node);
    v4l2_src *v = calloc(1, sizeof *v);
    if (!v) {
        cap_v4l2_describe_error(err, errlen, node, "open", ENOMEM);
        return NULL;
    }
    v->base.ops = &k_v4l2_ops;
    v->base.live = 1;
    v->io = io;
    v->fd = -1;
    copy_str(v->node, sizeof v->node, node);
    v->want = (cap_v4l2_want){.w = o ? o->w : 0, .h = o ? o->h : 0, .fps = o ? o->fps : 0, .fourcc = fourcc};

    struct v4l2_capability cap;
    if (node_open(io, node, &v->fd, &cap, err, errlen) < 0) {
        free(v);
        return NULL;
    }
    memset(&v->id, 0, sizeof v->id);
    v->id.index = -1;
    if (io == &cap_v4l2_io_default)
        cap_dev_identify(node, &v->id); /* no udev/sysfs identity for a fake device */
    snprintf(v->id.card, sizeof v->id.card, "%s", (const char *)cap.card);
    snprintf(v->id.bus, sizeof v->id.bus, "%s", (const char *)cap.bus_info);
    if (stream_start(v, 0, err, errlen) < 0) {
        stream_close(v);
        free(v);
        return NULL;
    }
    snprintf(v->base.name, sizeof v->base.name, "%s (%s)", v->id.card, node);
    v->base.fps = rate_fps(v->rate);
    v->base.max_bytes = v->out_bytes;
    return &v->base;
}
