/* vfcoach bench: speed of the full analysis on synthetic frames.
 *
 * For each size it renders a set of XRGB8888 frames (sky gradient, textured
 * sea, a tilted horizon, a small bright boat; the horizon rocks and the boat
 * drifts from frame to frame), enough of them to overflow the last-level
 * cache so every frame is read from memory as a camera frame would be.
 * It then times, single-threaded:
 *   - the memory floor: one plain read of the frame (the least any
 *     full-resolution analysis can cost),
 *   - each stage on its own (tone pass, composition, score),
 *   - the whole coach_analyze() call, whose median is the headline
 *     "bench WxH total_ms_median=..." line (one per size, parsed by
 *     tests/bench_reference.py and by people).
 * Medians, not means: other processes on a 2-core machine cause outliers.
 * Times are this thread's CPU time (CLOCK_THREAD_CPUTIME_ID): "ms on one
 * core" even when the machine is busy and the scheduler hands the core to
 * someone else mid-frame (cache pollution by others still counts).  On an
 * idle machine it equals wall time, which is printed alongside.
 */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "coach/app.h"
#include "coach/coach_internal.h"

#define BENCH_CACHE_BYTES (64u << 20) /* frames rotate through more than the LLC */
#define BENCH_MAX_BUFS 16

static double now_ms(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec * 1e3 + ts.tv_nsec * 1e-6;
}

/* CPU time of this thread: on a loaded machine it leaves out the time the
 * scheduler gave to others, which wall time cannot. */
static double cpu_ms(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
    return ts.tv_sec * 1e3 + ts.tv_nsec * 1e-6;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

static double median(double *v, int n)
{
    qsort(v, (size_t)n, sizeof(double), cmp_double);
    return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

static uint32_t hash32(uint32_t x)
{
    x ^= x >> 16;
    x *= 0x7feb352du;
    x ^= x >> 15;
    x *= 0x846ca68bu;
    x ^= x >> 16;
    return x;
}

/* One synthetic frame: k varies the horizon angle/height and the boat. */
static void render(uint8_t *p, int w, int h, int k)
{
    double ang = 2.0 * sin(k * 0.37) * M_PI / 180.0; /* +-2 degrees */
    double hy = h * (0.42 + 0.03 * sin(k * 0.23));
    double slope = tan(ang);
    double bx = w * (0.2 + 0.6 * fmod(k * 0.013, 1.0)), by = hy + h * 0.05;
    double bw = w * 0.06, bh = h * 0.05;
    for (int y = 0; y < h; y++) {
        uint8_t *row = p + (size_t)y * w * 4;
        for (int x = 0; x < w; x++) {
            /* horizon: y = hy - slope * (x - w/2) (right end higher for ang > 0) */
            double yh = hy - slope * (x - w * 0.5);
            int R, G, B;
            if (y < yh) {
                double s = y / yh;
                R = (int)(70 + 120 * s);
                G = (int)(110 + 90 * s);
                B = (int)(190 + 40 * s);
            } else {
                int n = (int)(hash32((uint32_t)(x * 7919 + y * 104729 + k)) & 31) - 16;
                int wave = (int)(12 * sin(x * 0.05 + y * 0.21 + k * 0.3));
                R = 30 + n / 2 + wave;
                G = 70 + n + wave;
                B = 100 + n + wave;
            }
            if (fabs(x - bx) < bw * 0.5 && fabs(y - by) < bh * 0.5) {
                R = 235;
                G = 225;
                B = 200;
            }
            row[4 * x + 0] = (uint8_t)(B < 0 ? 0 : B > 255 ? 255 : B);
            row[4 * x + 1] = (uint8_t)(G < 0 ? 0 : G > 255 ? 255 : G);
            row[4 * x + 2] = (uint8_t)(R < 0 ? 0 : R > 255 ? 255 : R);
            row[4 * x + 3] = 0xff;
        }
    }
}

/* The memory floor: read every byte of the frame once. */
static uint64_t read_once(const uint8_t *p, size_t n)
{
    const uint64_t *q = (const uint64_t *)p;
    uint64_t s0 = 0, s1 = 0, s2 = 0, s3 = 0;
    size_t i = 0, m = n / 8;
    for (; i + 4 <= m; i += 4) {
        s0 += q[i];
        s1 += q[i + 1];
        s2 += q[i + 2];
        s3 += q[i + 3];
    }
    for (; i < m; i++)
        s0 += q[i];
    return s0 ^ s1 ^ s2 ^ s3;
}

static int bench_size(int w, int h, int frames)
{
    size_t bytes = (size_t)w * h * 4;
    int nb = (int)(BENCH_CACHE_BYTES / bytes) + 1;
    if (nb < 3)
        nb = 3;
    if (nb > BENCH_MAX_BUFS)
        nb = BENCH_MAX_BUFS;
    uint8_t *buf[BENCH_MAX_BUFS] = { 0 };
    double *t_floor = calloc((size_t)frames, sizeof(double));
    double *t_tone = calloc((size_t)frames, sizeof(double));
    double *t_comp = calloc((size_t)frames, sizeof(double));
    double *t_score = calloc((size_t)frames, sizeof(double));
    double *t_total = calloc((size_t)frames, sizeof(double));
    double *c_total = calloc((size_t)frames, sizeof(double));
    coach_result *res = calloc(1, sizeof(*res));
    int rc = 1;
    coach_config cfg;
    coach_config_default(&cfg);
    cfg.max_w = w;
    cfg.max_h = h;
    int scale, aw, ah;
    coach_tone_geometry(w, h, &scale, &aw, &ah);
    coach_analyzer *an = coach_create(&cfg);
    coach_tone *tone = coach_tone_create(w, h);
    coach_compose *comp = coach_compose_create(aw, ah);
    coach_score_state sc;
    coach_score_reset(&sc);
    if (!t_floor || !t_tone || !t_comp || !t_score || !t_total || !c_total || !res || !an || !tone || !comp) {
        fprintf(stderr, "vfcoach bench: %dx%d: out of memory\n", w, h);
        goto out;
    }
    for (int i = 0; i < nb; i++) {
        buf[i] = malloc(bytes);
        if (!buf[i]) {
            fprintf(stderr, "vfcoach bench: %dx%d: out of memory for %d frames\n", w, h, nb);
            goto out;
        }
        render(buf[i], w, h, i);
    }

    uint64_t sink = 0;
    const double fps = 30.0;
    /* One loop, both measurements per step, so both see the same machine
     * load: the floor reads frame k+2, the stages run on frame k, the whole
     * analyzer on frame k+1; each was last touched nb steps ago. */
    const int warm = 5; /* untimed steps first: page faults, branch predictors */
    for (int i = -warm; i < frames; i++) {
        int k = (i + warm) % nb;
        coach_frame f = { .data = buf[k], .w = w, .h = h, .stride = w * 4,
                          .format = COACH_FMT_XRGB8888 };
        coach_frame f2 = f;
        f2.data = buf[(k + 1) % nb];
        double t = (i + warm) / fps;
        coach_aimg img;
        double t0 = cpu_ms();
        sink += read_once(buf[(k + 2) % nb], bytes);
        double t1 = cpu_ms();
        memset(res, 0, sizeof(*res));
        if (coach_tone_run(tone, &f, res, &img)) {
            fprintf(stderr, "vfcoach bench: %dx%d: tone pass failed\n", w, h);
            goto out;
        }
        double t2 = cpu_ms();
        coach_compose_run(comp, &img, w, h, t, &cfg, res);
        double t3 = cpu_ms();
        coach_score_sharpness_ref(&sc, t, res);
        coach_score_terms(&cfg, sc.have, res);
        coach_score_update(&sc, &cfg, t, res);
        coach_score_hints(&cfg, res);
        double t4 = cpu_ms();
        double c0 = cpu_ms(), w0 = now_ms();
        if (coach_analyze(an, &f2, t, res)) {
            fprintf(stderr, "vfcoach bench: %dx%d: analysis failed\n", w, h);
            goto out;
        }
        double w1 = now_ms(), c1 = cpu_ms();
        if (i >= 0) {
            t_floor[i] = t1 - t0;
            t_tone[i] = t2 - t1;
            t_comp[i] = t3 - t2;
            t_score[i] = t4 - t3;
            t_total[i] = w1 - w0;
            c_total[i] = c1 - c0;
        }
    }
    printf("size %dx%d: %d frames (%d distinct, XRGB8888), one thread; medians of thread CPU "
           "time:\n", w, h, frames, nb);
    printf("  memory floor %8.3f ms  (one read of the frame, %.1f MB)\n", median(t_floor, frames),
           bytes / 1048576.0);
    printf("  tone         %8.3f ms  (luma, histogram, clips, exposure, colour, Laplacian, "
           "%dx%d analysis image)\n", median(t_tone, frames), aw, ah);
    printf("  compose      %8.3f ms  (level, horizon, subject, balance, motion, focus)\n",
           median(t_comp, frames));
    printf("  score        %8.3f ms  (terms, smoothing, ready, hints)\n", median(t_score, frames));
    printf("  last frame: score %.1f, tilt %s%.2f deg, exposure %.2f EV (check: %llu)\n",
           res->score, res->has_tilt ? "" : "n/a ", res->has_tilt ? res->tilt_deg : 0.0,
           res->exposure_ev, (unsigned long long)(sink & 1));
    double wall = median(t_total, frames), cpu = median(c_total, frames);
    printf("  total        %8.3f ms  (coach_analyze; wall clock %.3f ms)\n", cpu, wall);
    printf("bench %dx%d total_ms_median=%.3f\n", w, h, cpu);
    fflush(stdout);
    rc = 0;
out:
    for (int i = 0; i < nb; i++)
        free(buf[i]);
    free(t_floor);
    free(t_tone);
    free(t_comp);
    free(t_score);
    free(t_total);
    free(c_total);
    free(res);
    coach_destroy(an);
    coach_tone_destroy(tone);
    coach_compose_destroy(comp);
    return rc;
}

int app_bench_main(int argc, char **argv)
{
    static const int defaults[][2] = { { 1280, 720 }, { 1920, 1080 }, { 3840, 2160 } };
    int sizes[8][2], nsizes = 0, frames = 100;
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        if ((!strcmp(a, "--size") || !strcmp(a, "--frames")) && i + 1 >= argc) {
            fprintf(stderr, "vfcoach bench: option '%s' needs a value\n", a);
            return 2;
        }
        if (!strcmp(a, "--size")) {
            if (nsizes == 8) {
                fprintf(stderr, "vfcoach bench: at most 8 --size options\n");
                return 2;
            }
            if (app_parse_size(argv[++i], &sizes[nsizes][0], &sizes[nsizes][1])) {
                fprintf(stderr, "vfcoach bench: --size '%s': expected WxH, %d..%d each\n",
                        argv[i], COACH_MIN_DIM, COACH_MAX_DIM);
                return 2;
            }
            nsizes++;
        } else if (!strcmp(a, "--frames")) {
            char *end;
            long n = strtol(argv[++i], &end, 10);
            if (end == argv[i] || *end || n < 1 || n > 100000) {
                fprintf(stderr, "vfcoach bench: --frames '%s': expected 1..100000\n", argv[i]);
                return 2;
            }
            frames = (int)n;
        } else if (!strcmp(a, "-h") || !strcmp(a, "--help")) {
            printf("usage: vfcoach bench [--size WxH]... [--frames N]\n"
                   "  times the full analysis on synthetic frames (default sizes 1280x720,\n"
                   "  1920x1080, 3840x2160; %d frames each) and prints medians per stage\n",
                   frames);
            return 0;
        } else {
            fprintf(stderr, "vfcoach bench: unknown option '%s' (see --help)\n", a);
            return 2;
        }
    }
    if (nsizes == 0) {
        memcpy(sizes, defaults, sizeof(defaults));
        nsizes = 3;
    }
    int rc = 0;
    for (int i = 0; i < nsizes; i++)
        rc |= bench_size(sizes[i][0], sizes[i][1], frames);
    return rc;
}
