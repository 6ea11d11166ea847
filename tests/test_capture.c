/* cmocka tests for capture/.  Several people add tests here at once: add with
 * small insertions (never rewrite the file), each test next to its section's
 * other tests and in the matching section of main()'s list. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include "capture/capture.h"

/* section A */
#include <errno.h>
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include <poll.h>
#include <sys/stat.h>

#include <SDL.h>
#include <SDL_image.h>

#include "capture/capture_internal.h"

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* ==== section A ==== */

/* ---- mailbox ---- */

static cap_frame meta_seq(uint64_t seq)
{
    cap_frame f;
    memset(&f, 0, sizeof f);
    f.seq = seq;
    return f;
}

static void test_mailbox_drop_counting(void **state)
{
    (void)state;
    cap_mailbox *m = cap_mailbox_create(64);
    assert_non_null(m);
    cap_frame out;
    assert_int_equal(cap_mailbox_take(m, &out), -EAGAIN);
    for (uint64_t i = 0; i < 5; i++) {
        uint8_t *b = cap_mailbox_begin(m, 64);
        assert_non_null(b);
        memset(b, (int)i, 64);
        cap_frame f = meta_seq(i);
        cap_mailbox_publish(m, &f);
    }
    cap_stats st;
    cap_mailbox_stats(m, &st);
    /* five published, none taken: four were replaced unread */
    assert_int_equal(st.published, 5);
    assert_int_equal(st.dropped, 4);
    assert_int_equal(st.taken, 0);
    assert_int_equal(cap_mailbox_take(m, &out), 0);
    assert_int_equal(out.seq, 4);
    assert_int_equal(out.view.data[0], 4);
    cap_mailbox_release(m);
    assert_int_equal(cap_mailbox_take(m, &out), -EAGAIN);
    cap_mailbox_stats(m, &st);
    assert_int_equal(st.taken, 1);
    assert_null(cap_mailbox_begin(m, 65)); /* larger than the buffers */
    cap_mailbox_destroy(m);
    cap_mailbox_destroy(NULL);
}

static void test_mailbox_newest_wins(void **state)
{
    (void)state;
    cap_mailbox *m = cap_mailbox_create(16);
    cap_frame out;
    for (uint64_t round = 0; round < 10; round++) {
        for (uint64_t k = 0; k <= round % 3; k++) {
            uint8_t *b = cap_mailbox_begin(m, 16);
            b[0] = (uint8_t)(round * 10 + k);
            cap_frame f = meta_seq(round * 10 + k);
            cap_mailbox_publish(m, &f);
        }
        assert_int_equal(cap_mailbox_take(m, &out), 0);
        assert_int_equal(out.seq, round * 10 + round % 3);
        assert_int_equal(out.view.data[0], (uint8_t)(round * 10 + round % 3));
        cap_mailbox_release(m);
    }
    cap_mailbox_destroy(m);
}

static void test_mailbox_reader_buffer_kept(void **state)
{
    (void)state;
    cap_mailbox *m = cap_mailbox_create(32);
    uint8_t *b = cap_mailbox_begin(m, 32);
    memset(b, 0xAB, 32);
    cap_frame f = meta_seq(0);
    cap_mailbox_publish(m, &f);
    cap_frame held;
    assert_int_equal(cap_mailbox_take(m, &held), 0);
    const uint8_t *pending = NULL;
    for (uint64_t i = 1; i < 50; i++) {
        uint8_t *w = cap_mailbox_begin(m, 32);
        assert_ptr_not_equal(w, held.view.data);
        assert_ptr_not_equal(w, pending); /* nor the unread frame it may replace */
        memset(w, (int)i, 32);
        f = meta_seq(i);
        cap_mailbox_publish(m, &f);
        pending = w;
    }
    for (int i = 0; i < 32; i++)
        assert_int_equal(held.view.data[i], 0xAB);
    cap_mailbox_release(m);
    cap_frame out;
    assert_int_equal(cap_mailbox_take(m, &out), 0);
    assert_int_equal(out.seq, 49);
    for (int i = 0; i < 32; i++)
        assert_int_equal(out.view.data[i], 49);
    cap_mailbox_release(m);
    cap_mailbox_destroy(m);
}

#define MB_FRAMES 20000
#define MB_BYTES 4096

static void *mailbox_producer(void *arg)
{
    cap_mailbox *m = arg;
    for (uint64_t i = 1; i <= MB_FRAMES; i++) {
        uint8_t *b = cap_mailbox_begin(m, MB_BYTES);
        if (!b)
            return NULL;
        memset(b, (int)(i & 0xFF), MB_BYTES);
        cap_frame f = meta_seq(i);
        cap_mailbox_publish(m, &f);
    }
    return NULL;
}

static void test_mailbox_producer_thread(void **state)
{
    (void)state;
    cap_mailbox *m = cap_mailbox_create(MB_BYTES);
    pthread_t th;
    assert_int_equal(pthread_create(&th, NULL, mailbox_producer, m), 0);
    uint64_t last = 0, got = 0;
    int torn = 0;
    for (;;) {
        cap_frame f;
        if (cap_mailbox_take(m, &f) == 0) {
            got++;
            assert_true(f.seq > last); /* frames only move forward */
            last = f.seq;
            /* while we hold it, the producer keeps writing elsewhere */
            for (int pass = 0; pass < 3; pass++)
                for (int i = 0; i < MB_BYTES; i += 97)
                    torn |= f.view.data[i] != (uint8_t)(f.seq & 0xFF);
            cap_mailbox_release(m);
            if (f.seq == MB_FRAMES)
                break;
        } else {
            sched_yield();
        }
    }
    pthread_join(th, NULL);
    assert_false(torn);
    cap_stats st;
    cap_mailbox_stats(m, &st);
    assert_int_equal(st.published, MB_FRAMES);
    assert_int_equal(st.taken, got);
    /* every published frame was either taken or replaced unread */
    assert_int_equal(st.taken + st.dropped, st.published);
    cap_mailbox_destroy(m);
}

/* ---- capture thread ---- */

typedef struct ev_log {
    int frames, lost, back, end;
    int order[8], n;
} ev_log;

static void log_event(void *ctx, cap_event ev)
{
    ev_log *l = ctx;
    if (ev == CAP_EV_FRAME)
        __atomic_add_fetch(&l->frames, 1, __ATOMIC_SEQ_CST);
    else {
        int i = __atomic_fetch_add(&l->n, 1, __ATOMIC_SEQ_CST);
        if (i < 8)
            __atomic_store_n(&l->order[i], (int)ev, __ATOMIC_SEQ_CST);
        if (ev == CAP_EV_LOST)
            __atomic_add_fetch(&l->lost, 1, __ATOMIC_SEQ_CST);
        if (ev == CAP_EV_BACK)
            __atomic_add_fetch(&l->back, 1, __ATOMIC_SEQ_CST);
        if (ev == CAP_EV_END)
            __atomic_add_fetch(&l->end, 1, __ATOMIC_SEQ_CST);
    }
}

static double mono_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* Waits up to limit seconds for *v >= want. */
static int wait_for(int *v, int want, double limit)
{
    double t0 = mono_s();
    while (__atomic_load_n(v, __ATOMIC_SEQ_CST) < want) {
        if (mono_s() - t0 > limit)
            return 0;
        usleep(2000);
    }
    return 1;
}

/* A scripted device: poll_fd is a pipe; produce() and recover() follow the
 * script so the thread's reactions can be checked. */
typedef struct fake_dev {
    cap_source base;
    int rd, wr;
    int produce_rc;       /* what produce() returns the first time */
    int recover_mode;     /* 0: wait for stop (-ECANCELED); 1: come back */
    int recovered_rc;
    int calls;
    const char *note;
} fake_dev;

static int fake_poll_fd(cap_source *s)
{
    return ((fake_dev *)s)->rd;
}

static int fake_produce(cap_source *s, cap_mailbox *mb, cap_frame *meta)
{
    fake_dev *f = (fake_dev *)s;
    char c;
    if (read(f->rd, &c, 1) != 1)
        return -EAGAIN;
    if (f->calls++ == 0 && f->produce_rc) {
        if (f->note)
            snprintf(s->note, sizeof s->note, "%s", f->note);
        return f->produce_rc;
    }
    uint8_t *b = cap_mailbox_begin(mb, 16);
    memset(b, 7, 16);
    meta->view.data = b;
    meta->view.w = 2;
    meta->view.h = 2;
    meta->view.stride = 8;
    meta->view.format = COACH_FMT_XRGB8888;
    meta->seq = (uint64_t)f->calls;
    return 0;
}

static int fake_recover(cap_source *s, int stop_fd)
{
    fake_dev *f = (fake_dev *)s;
    if (f->recover_mode == 1) {
        ssize_t w = write(f->wr, "x", 1); /* the device streams again */
        (void)w;
        return 0;
    }
    struct pollfd p = {.fd = stop_fd, .events = POLLIN};
    int n = poll(&p, 1, 20000);
    f->recovered_rc = n > 0 ? -ECANCELED : -ETIMEDOUT;
    return f->recovered_rc;
}

static void fake_destroy(cap_source *s)
{
    fake_dev *f = (fake_dev *)s;
    close(f->rd);
    close(f->wr);
    free(f);
}

static const cap_source_ops fake_ops = {fake_poll_fd, fake_produce, fake_recover, fake_destroy};

static fake_dev *fake_new(int produce_rc, int recover_mode)
{
    fake_dev *f = calloc(1, sizeof *f);
    int p[2];
    assert_int_equal(pipe(p), 0);
    f->rd = p[0];
    f->wr = p[1];
    f->base.ops = &fake_ops;
    snprintf(f->base.name, sizeof f->base.name, "fake camera");
    f->base.fps = 30;
    f->base.live = 1;
    f->base.max_bytes = 16;
    f->produce_rc = produce_rc;
    f->recover_mode = recover_mode;
    return f;
}

/* Starts the thread on a fake device and gives it one readable byte. */
static cap_thread *start_fake(fake_dev *f, cap_mailbox **m, ev_log *l)
{
    *m = cap_mailbox_create(16);
    memset(l, 0, sizeof *l);
    cap_thread *t = cap_thread_start(&f->base, *m, log_event, l);
    assert_non_null(t);
    ssize_t w = write(f->wr, "x", 1);
    assert_int_equal(w, 1);
    return t;
}

static void test_thread_stop_paced_demo(void **state)
{
    (void)state;
    char err[256];
    cap_source_opts o = {.w = 640, .h = 480, .fps = 30};
    cap_source *s = cap_source_open("demo", &o, err, sizeof err);
    assert_non_null(s);
    cap_mailbox *m = cap_mailbox_create(cap_source_max_bytes(s));
    ev_log l = {0};
    cap_thread *t = cap_thread_start(s, m, log_event, &l);
    assert_non_null(t);
    assert_true(wait_for(&l.frames, 3, 10.0));
    cap_frame f;
    assert_int_equal(cap_mailbox_take(m, &f), 0);
    assert_true(f.truth.valid);
    assert_int_equal(f.view.w, 640);
    assert_int_equal(f.view.format, COACH_FMT_XRGB8888);
    cap_mailbox_release(m);
    double t0 = mono_s();
    cap_thread_destroy(t);
    /* liveness bound, not a speed target: a stop must not wait for more
     * than the frame in progress */
    assert_true(mono_s() - t0 < 2.0);
    cap_thread_destroy(NULL);
    cap_mailbox_destroy(m);
}

static void test_thread_stop_silent_device(void **state)
{
    (void)state;
    fake_dev *f = fake_new(0, 0);
    cap_mailbox *m = cap_mailbox_create(16);
    ev_log l = {0};
    cap_thread *t = cap_thread_start(&f->base, m, log_event, &l);
    assert_non_null(t);
    usleep(100000); /* the thread now blocks in poll on a device that sends nothing */
    double t0 = mono_s();
    cap_thread_destroy(t);
    assert_true(mono_s() - t0 < 2.0);
    assert_int_equal(l.frames, 0);
    cap_mailbox_destroy(m);
}

static void test_thread_lost_then_back(void **state)
{
    (void)state;
    cap_mailbox *m;
    ev_log l;
    cap_thread *t = start_fake(fake_new(-ENODEV, 1), &m, &l);
    assert_true(wait_for(&l.frames, 1, 5.0));
    assert_int_equal(l.lost, 1);
    assert_int_equal(l.back, 1);
    assert_int_equal(l.order[0], CAP_EV_LOST);
    assert_int_equal(l.order[1], CAP_EV_BACK);
    char st[256];
    cap_thread_status(t, st, sizeof st);
    assert_non_null(strstr(st, "fake camera"));
    assert_non_null(strstr(st, "back"));
    cap_thread_destroy(t);
    cap_mailbox_destroy(m);
}

static void test_thread_stop_while_recovering(void **state)
{
    (void)state;
    cap_mailbox *m;
    ev_log l;
    cap_thread *t = start_fake(fake_new(-EIO, 0), &m, &l);
    assert_true(wait_for(&l.lost, 1, 5.0));
    char st[256];
    cap_thread_status(t, st, sizeof st);
    assert_non_null(strstr(st, "lost"));
    usleep(50000); /* now inside recover(), waiting for the device */
    double t0 = mono_s();
    cap_thread_destroy(t);
    assert_true(mono_s() - t0 < 2.0);
    assert_int_equal(l.back, 0);
    assert_int_equal(l.end, 0); /* a stop is not a failure */
    cap_mailbox_destroy(m);
}

static void test_thread_fatal_error_ends(void **state)
{
    (void)state;
    for (int with_note = 0; with_note < 2; with_note++) {
        fake_dev *f = fake_new(-EPROTO, 1);
        f->note = with_note ? "fake camera: sends frames of the wrong size" : NULL;
        cap_mailbox *m;
        ev_log l;
        cap_thread *t = start_fake(f, &m, &l);
        assert_true(wait_for(&l.end, 1, 5.0));
        char st[256];
        cap_thread_status(t, st, sizeof st);
        if (with_note)
            assert_string_equal(st, "fake camera: sends frames of the wrong size");
        else
            assert_non_null(strstr(st, strerror(EPROTO)));
        assert_int_equal(l.lost, 0);
        cap_thread_destroy(t);
        cap_mailbox_destroy(m);
    }
}

/* ---- demo scenes ---- */

static char g_tmpdir[256];
static const char *tmp_path(const char *name);
static int tmpdir_setup(void **state);
static int tmpdir_teardown(void **state);

/* sRGB decoding, IEC 61966-2-1:1999 section 5.2 (written out here rather
 * than shared with the code under test). */
static double ref_srgb_decode(int code)
{
    double c = code / 255.0;
    return c <= 0.04045 ? c / 12.92 : pow((c + 0.055) / 1.055, 2.4);
}

/* Relative luminance of an XRGB8888 pixel, ITU-R BT.709-6 item 3.2 weights. */
static double ref_lum(const uint8_t *p)
{
    return 0.2126 * ref_srgb_decode(p[2]) + 0.7152 * ref_srgb_decode(p[1]) +
           0.0722 * ref_srgb_decode(p[0]);
}

static double mean_lum(const uint8_t *img, int w, int h)
{
    double sum = 0;
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
            sum += ref_lum(img + ((size_t)y * (size_t)w + (size_t)x) * 4);
    return sum / ((double)w * h);
}

static cap_source *open_demo(const char *spec, int w, int h)
{
    char err[256];
    cap_source_opts o = {.w = w, .h = h, .seed = 7};
    cap_source *s = cap_source_open(spec, &o, err, sizeof err);
    if (!s)
        print_error("%s\n", err);
    assert_non_null(s);
    return s;
}

static void test_demo_deterministic(void **state)
{
    (void)state;
    const char *scenes[] = {"demo:harbour", "demo:tabletop"};
    for (int k = 0; k < 2; k++) {
        cap_source *a = open_demo(scenes[k], 800, 600), *b = open_demo(scenes[k], 800, 600);
        size_t n = 800u * 600u * 4u;
        uint8_t *x = malloc(n), *y = malloc(n), *z = malloc(n);
        cap_truth ta, tb, tc;
        /* render b at other times first: no state may leak between frames */
        assert_int_equal(cap_demo_render(b, 11.0, z, 800 * 4, &tc), 0);
        assert_int_equal(cap_demo_render(a, 3.25, x, 800 * 4, &ta), 0);
        assert_int_equal(cap_demo_render(b, 3.25, y, 800 * 4, &tb), 0);
        assert_memory_equal(x, y, n);
        assert_memory_equal(&ta, &tb, sizeof ta);
        assert_int_equal(cap_demo_render(a, 4.25, z, 800 * 4, &tc), 0);
        assert_true(memcmp(x, z, n) != 0);
        cap_source_destroy(a);
        cap_source_destroy(b);
        free(x);
        free(y);
        free(z);
    }
    /* a different seed gives a different frame */
    char err[256];
    cap_source_opts o1 = {.w = 640, .h = 480, .seed = 1}, o2 = {.w = 640, .h = 480, .seed = 2};
    cap_source *a = cap_source_open("demo", &o1, err, sizeof err);
    cap_source *b = cap_source_open("demo", &o2, err, sizeof err);
    uint8_t *x = malloc(640 * 480 * 4), *y = malloc(640 * 480 * 4);
    cap_demo_render(a, 1.0, x, 640 * 4, NULL);
    cap_demo_render(b, 1.0, y, 640 * 4, NULL);
    assert_true(memcmp(x, y, 640 * 480 * 4) != 0);
    cap_source_destroy(a);
    cap_source_destroy(b);
    free(x);
    free(y);
}

static void test_demo_sizes(void **state)
{
    (void)state;
    static const int sizes[][2] = {{640, 480}, {1280, 720}, {1001, 777}, {1080, 1920}, {1920, 1080},
                                   {3840, 2160}};
    const char *scenes[] = {"demo", "demo:tabletop"};
    for (size_t i = 0; i < sizeof sizes / sizeof sizes[0]; i++) {
        for (int k = 0; k < 2; k++) {
            int w = sizes[i][0], h = sizes[i][1];
            cap_source *s = open_demo(scenes[k], w, h);
            assert_true(cap_source_max_bytes(s) >= (size_t)w * (size_t)h * 4);
            int dw, dh;
            assert_int_equal(cap_demo_size(s, &dw, &dh), 0);
            assert_int_equal(dw, w);
            assert_int_equal(dh, h);
            /* a stride with padding: the row ends must stay untouched */
            int stride = w * 4 + 64;
            uint8_t *buf = malloc((size_t)stride * (size_t)h);
            memset(buf, 0x5A, (size_t)stride * (size_t)h);
            cap_truth tr;
            assert_int_equal(cap_demo_render(s, 2.0, buf, stride, &tr), 0);
            assert_int_equal(buf[(size_t)stride * 3 + (size_t)w * 4 + 10], 0x5A);
            assert_true(tr.valid);
            assert_true(tr.horizon_y > 0 && tr.horizon_y < 1);
            assert_true(fabs(tr.horizon_deg) < 6);
            assert_true(tr.subject_x > 0 && tr.subject_x < 1 && tr.subject_w > 0.02);
            assert_true(tr.blur_sigma >= 0);
            /* not a flat frame */
            double lo = 1, hi = 0;
            for (int y = 0; y < h; y += 7)
                for (int x = 0; x < w; x += 13) {
                    double v = ref_lum(buf + (size_t)y * (size_t)stride + (size_t)x * 4);
                    lo = v < lo ? v : lo;
                    hi = v > hi ? v : hi;
                }
            assert_true(hi - lo > 0.1);
            free(buf);
            cap_source_destroy(s);
        }
    }
    char err[256];
    cap_source_opts big = {.w = 4096, .h = 2160}, tiny = {.w = 320, .h = 240};
    assert_null(cap_source_open("demo", &big, err, sizeof err));
    assert_non_null(strstr(err, "4096x2160"));
    assert_null(cap_source_open("demo:tabletop", &tiny, err, sizeof err));
    assert_non_null(strstr(err, "320x240"));
}

static void test_demo_exposure_one_stop(void **state)
{
    (void)state;
    const char *scenes[] = {"demo", "demo:tabletop"};
    for (int k = 0; k < 2; k++) {
        int w = 960, h = 540;
        cap_source *s = open_demo(scenes[k], w, h);
        uint8_t *a = malloc((size_t)w * h * 4), *b = malloc((size_t)w * h * 4);
        cap_truth ta, tb;
        cap_demo_pin pin = {.exposure_ev = -0.5, .blur_sigma = NAN, .horizon_deg = NAN};
        assert_int_equal(cap_demo_set_pin(s, &pin), 0);
        cap_demo_render(s, 5.0, a, w * 4, &ta);
        pin.exposure_ev = 0.5;
        cap_demo_set_pin(s, &pin);
        cap_demo_render(s, 5.0, b, w * 4, &tb);
        assert_float_equal(ta.exposure_ev, -0.5, 1e-12);
        assert_float_equal(tb.exposure_ev, 0.5, 1e-12);
        /* one stop = twice the light (APEX, ASA PH2.5-1960, and ISO 2720:
         * exposure values step in powers of two), measured as linear
         * relative luminance */
        double ratio = mean_lum(b, w, h) / mean_lum(a, w, h);
        print_message("%s: mean luminance ratio for +1 EV = %.4f\n", scenes[k], ratio);
        assert_float_equal(ratio, 2.0, 0.04);
        free(a);
        free(b);
        cap_source_destroy(s);
    }
}

/* Continuous y (pixel centres at y + 0.5) where a column of linear luma
 * falls from the sky to the sea: the largest drop, located at the midpoint
 * of the levels two pixels either side.  Rows in [skip0, skip1) are ignored
 * (the boat). */
static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

/* Luma at row y around column x: the median of 15 pixels along the row, so
 * a short glint on the water does not count as an edge. */
static double row_median(const uint8_t *img, int w, int x, int y)
{
    double v[15];
    int n = 0;
    for (int k = -7; k <= 7; k++) {
        int xx = x + k < 0 ? 0 : x + k >= w ? w - 1 : x + k;
        v[n++] = ref_lum(img + ((size_t)y * (size_t)w + (size_t)xx) * 4);
    }
    qsort(v, (size_t)n, sizeof v[0], cmp_double);
    return v[n / 2];
}

static double find_drop(const uint8_t *img, int w, int h, int x, int skip0, int skip1)
{
    /* the row where 6 rows above are brightest against 6 rows below */
    enum { K = 6, L = 8 };
    double *m = malloc(sizeof(double) * (size_t)h);
    for (int y = 0; y < h; y++)
        m[y] = row_median(img, w, x, y);
    double best = 0;
    int yb = -1;
    for (int y = K + L; y < h - K - L - 1; y++) {
        if (y + K + 1 >= skip0 && y - K <= skip1)
            continue;
        double a = 0, b = 0;
        for (int k = 0; k < K; k++)
            a += m[y - k], b += m[y + 1 + k];
        if ((a - b) / K > best) {
            best = (a - b) / K;
            yb = y;
        }
    }
    double r = NAN;
    if (yb >= 0) {
        /* where it crosses half way between the levels L rows either side */
        double mid = (m[yb - L] + m[yb + 1 + L]) / 2;
        for (int y = yb - L; y < yb + L && isnan(r); y++)
            if (m[y] >= mid && m[y + 1] < mid)
                r = y + 0.5 + (m[y] - mid) / (m[y] - m[y + 1]);
    }
    free(m);
    return r;
}

/* Where the horizon line of the truth passes column x (continuous y). */
static double truth_y_at(const cap_truth *t, int w, int h, int x)
{
    return t->horizon_y * h - (x + 0.5 - w / 2.0) * tan(t->horizon_deg * M_PI / 180.0);
}

static void check_horizon(const uint8_t *img, int w, int h, const cap_truth *t)
{
    int skip0 = (int)((t->subject_y - t->subject_h / 2) * h) - 8;
    int skip1 = (int)((t->subject_y + t->subject_h / 2) * h) + 8;
    int xs[3] = {w / 4, w / 2, 3 * w / 4};
    double ys[3];
    for (int i = 0; i < 3; i++) {
        int in_boat = fabs((xs[i] + 0.5) / w - t->subject_x) < t->subject_w / 2 + 0.02;
        ys[i] = find_drop(img, w, h, xs[i], in_boat ? skip0 : -1, in_boat ? skip1 : -1);
        double want = truth_y_at(t, w, h, xs[i]);
        print_message("horizon at x=%d: found %.2f, truth %.2f (tilt %.2f deg)\n", xs[i], ys[i],
                      want, t->horizon_deg);
        /* the brief allows ~2 px */
        assert_true(fabs(ys[i] - want) < 2.0);
    }
    /* tilt from the two outer columns, + when the right end is higher */
    double tilt = atan2(ys[0] - ys[2], (double)(xs[2] - xs[0])) * 180.0 / M_PI;
    assert_float_equal(tilt, t->horizon_deg, 0.15);
}

static void test_demo_horizon_truth(void **state)
{
    (void)state;
    int w = 1280, h = 720;
    cap_source *s = open_demo("demo", w, h);
    uint8_t *img = malloc((size_t)w * h * 4);
    cap_truth t;
    /* the scene's own drift at a few times, sharp or soft */
    double times[] = {0.0, 2.6, 7.9, 15.3, 33.3};
    for (size_t i = 0; i < sizeof times / sizeof times[0]; i++) {
        cap_demo_render(s, times[i], img, w * 4, &t);
        check_horizon(img, w, h, &t);
    }
    /* pinned tilts either way */
    double tilts[] = {-3.5, 0.0, 2.0};
    for (size_t i = 0; i < 3; i++) {
        cap_demo_pin pin = {.exposure_ev = NAN, .blur_sigma = 0, .horizon_deg = tilts[i]};
        cap_demo_set_pin(s, &pin);
        cap_demo_render(s, 1.0, img, w * 4, &t);
        assert_float_equal(t.horizon_deg, tilts[i], 1e-12);
        check_horizon(img, w, h, &t);
    }
    free(img);
    cap_source_destroy(s);
}

static void test_demo_blur_edge_width(void **state)
{
    (void)state;
    int w = 1920, h = 1080;
    cap_source *s = open_demo("demo", w, h);
    uint8_t *img = malloc((size_t)w * h * 4);
    double sigmas[] = {2.0, 4.0};
    for (int k = 0; k < 2; k++) {
        cap_demo_pin pin = {.exposure_ev = 0, .blur_sigma = sigmas[k], .horizon_deg = 0};
        cap_demo_set_pin(s, &pin);
        cap_truth t;
        cap_demo_render(s, 3.0, img, w * 4, &t);
        assert_float_equal(t.blur_sigma, sigmas[k], 1e-12);
        /* average the columns away from the boat to quiet the waves */
        double se = sqrt(sigmas[k] * sigmas[k] + 1.0 / 12); /* + pixel-area antialiasing */
        int R = (int)ceil(4 * se) + 2;
        double yh = t.horizon_y * h;
        int y0 = (int)floor(yh) - R, n = 2 * R + 1;
        double prof[64] = {0};
        int cols = 0;
        for (int x = 0; x < w; x += 3) {
            if (fabs((x + 0.5) / w - t.subject_x) < t.subject_w / 2 + 0.03)
                continue;
            for (int i = 0; i < n; i++)
                prof[i] += ref_lum(img + ((size_t)(y0 + i) * (size_t)w + (size_t)x) * 4);
            cols++;
        }
        for (int i = 0; i < n; i++)
            prof[i] /= cols;
        double top = prof[0], bot = prof[n - 1];
        double y10 = NAN, y90 = NAN;
        for (int i = 0; i + 1 < n; i++) {
            double l90 = top - 0.1 * (top - bot), l10 = top - 0.9 * (top - bot);
            if (prof[i] >= l90 && prof[i + 1] < l90)
                y10 = i + (prof[i] - l90) / (prof[i] - prof[i + 1]);
            if (prof[i] >= l10 && prof[i + 1] < l10)
                y90 = i + (prof[i] - l10) / (prof[i] - prof[i + 1]);
        }
        /* A Gaussian-blurred step rises from 10 % to 90 % over
         * 2 * 1.28155 sigma (the 0.9 quantile of the standard normal
         * distribution, any statistics table). */
        double width = y90 - y10, want = 2 * 1.28155 * se;
        print_message("sigma %.1f: 10-90 %% edge width %.2f px, Gaussian %.2f px\n", sigmas[k],
                      width, want);
        assert_float_equal(width, want, 0.12 * want);
    }
    free(img);
    cap_source_destroy(s);
}

static void test_demo_boat_box(void **state)
{
    (void)state;
    int w = 1280, h = 720;
    cap_source *s = open_demo("demo", w, h);
    uint8_t *img = malloc((size_t)w * h * 4);
    double times[] = {0.0, 20.0, 45.0};
    for (int k = 0; k < 3; k++) {
        cap_demo_pin pin = {.exposure_ev = 0, .blur_sigma = 0, .horizon_deg = NAN};
        cap_demo_set_pin(s, &pin);
        cap_truth t;
        cap_demo_render(s, times[k], img, w * 4, &t);
        double tx0 = (t.subject_x - t.subject_w / 2) * w, tx1 = (t.subject_x + t.subject_w / 2) * w;
        double ty0 = (t.subject_y - t.subject_h / 2) * h, ty1 = (t.subject_y + t.subject_h / 2) * h;
        int rx0 = (int)tx0 - 14, rx1 = (int)tx1 + 14, ry0 = (int)ty0 - 14, ry1 = (int)ty1 + 14;
        assert_true(rx0 >= 0 && rx1 < w && ry0 >= 0 && ry1 < h);
        /* the sea around the box, then a threshold half way to the boat's
         * brightest (above the sea's glints) */
        double bg = 0, peak = 0;
        int nbg = 0;
        for (int y = ry0; y <= ry1; y++)
            for (int x = rx0; x <= rx1; x++) {
                double v = ref_lum(img + ((size_t)y * (size_t)w + (size_t)x) * 4);
                if (x < rx0 + 4 || x > rx1 - 4 || y < ry0 + 4 || y > ry1 - 4)
                    bg += v, nbg++;
                else if (x > tx0 && x < tx1 && y > ty0 && y < ty1 && v > peak)
                    peak = v;
            }
        bg /= nbg;
        double thr = bg + 0.4 * (peak - bg);
        /* each side: boat pixels within 5 px inside the edge (a hull tip is
         * a narrow wedge), next to none from 3 to 10 px outside it */
        for (int side = 0; side < 4; side++) {
            int in = 0, out = 0, nout = 0;
            for (int y = ry0; y <= ry1; y++)
                for (int x = rx0; x <= rx1; x++) {
                    double px = x + 0.5, py = y + 0.5;
                    double dist = side == 0 ? tx0 - px : side == 1 ? px - tx1 :
                                  side == 2 ? ty0 - py : py - ty1; /* > 0 outside */
                    int along = side < 2 ? (py > ty0 && py < ty1) : (px > tx0 && px < tx1);
                    if (!along)
                        continue;
                    int bright = ref_lum(img + ((size_t)y * (size_t)w + (size_t)x) * 4) > thr;
                    if (dist > -5 && dist <= 0)
                        in += bright;
                    else if (dist >= 3 && dist <= 10)
                        out += bright, nout++;
                }
            print_message("boat box side %d: %d boat pixels inside the edge, %d of %d outside\n",
                          side, in, out, nout);
            assert_true(in > 0);
            assert_true(out * 50 < nout); /* under 2 %: the odd glint */
        }
    }
    free(img);
    cap_source_destroy(s);
}

static void save_png(const char *path, const uint8_t *img, int w, int h)
{
    SDL_Surface *sf = SDL_CreateRGBSurfaceWithFormatFrom((void *)img, w, h, 32, w * 4,
                                                         SDL_PIXELFORMAT_XRGB8888);
    assert_non_null(sf);
    assert_int_equal(IMG_SavePNG(sf, path), 0);
    SDL_FreeSurface(sf);
}

/* The blur a frame reports is the blur it has: OpenCV's GaussianBlur of the
 * sharp frame (in linear light) must match the frame rendered soft. */
static void test_demo_blur_matches_opencv(void **state)
{
    (void)state;
    if (access("/usr/bin/python3", X_OK) != 0)
        skip();
    int w = 1280, h = 720;
    cap_source *s = open_demo("demo", w, h);
    uint8_t *img = malloc((size_t)w * h * 4);
    for (int k = 0; k < 2; k++) {
        cap_demo_pin pin = {.exposure_ev = 0, .blur_sigma = k ? 3.0 : 0.0, .horizon_deg = -1.5};
        cap_demo_set_pin(s, &pin);
        cap_demo_render(s, 4.0, img, w * 4, NULL);
        save_png(tmp_path(k ? "soft.png" : "sharp.png"), img, w, h);
    }
    free(img);
    cap_source_destroy(s);
    FILE *f = fopen(tmp_path("cmp.py"), "w");
    assert_non_null(f);
    fputs("import sys, cv2, numpy as np\n"
          "d = sys.argv[1]\n"
          "def lin(p):\n"
          "    c = cv2.imread(p, cv2.IMREAD_COLOR).astype(np.float64) / 255.0\n"
          "    # IEC 61966-2-1 sRGB decoding\n"
          "    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)\n"
          "def enc(l):\n"
          "    l = np.clip(l, 0, 1)\n"
          "    return 255 * np.where(l <= 0.0031308, 12.92 * l, 1.055 * l ** (1 / 2.4) - 0.055)\n"
          "sharp = lin(d + '/sharp.png')\n"
          "got = enc(lin(d + '/soft.png'))\n"
          "m = 16\n"
          "def err(sg):\n"
          "    ref = enc(cv2.GaussianBlur(sharp, (0, 0), sg, borderType=cv2.BORDER_REFLECT))\n"
          "    return np.abs(ref - got)[m:-m, m:-m]\n"
          "diff = err(3.0)\n"
          "grid = np.arange(1.5, 4.51, 0.25)\n"
          "best = grid[int(np.argmin([err(g).mean() for g in grid]))]\n"
          "print('sigma 3: mean %.3f p99.9 %.3f codes; best-fitting sigma %.2f' % (diff.mean(), np.percentile(diff, 99.9), best))\n"
          "sys.exit(0 if diff.mean() < 0.6 and np.percentile(diff, 99.9) < 4.0 and abs(best - 3.0) <= 0.25 else 1)\n",
          f);
    fclose(f);
    char cmd[1200];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 '%s' '%s'", tmp_path("cmp.py"), g_tmpdir);
    /* differences in 8-bit sRGB codes; limits are ours: under 0.6 code on
     * average (two independent roundings to 8 bits alone differ by 1/3 of a
     * code on average), under 4 codes for all but 0.1 % of pixels, and of the
     * sigmas 1.5..4.5 in quarter steps OpenCV's 3.0 must fit best (+-0.25) */
    assert_int_equal(system(cmd), 0);
}

static void test_demo_tabletop_truth(void **state)
{
    (void)state;
    int w = 1280, h = 720;
    cap_source *s = open_demo("demo:tabletop", w, h);
    uint8_t *img = malloc((size_t)w * h * 4);
    double times[] = {0.0, 9.0, 21.0};
    for (int k = 0; k < 3; k++) {
        cap_truth t;
        cap_demo_render(s, times[k], img, w * 4, &t);
        /* the table's front edge is the level line */
        int xs[2] = {w / 8, 7 * w / 8};
        double ys[2];
        for (int i = 0; i < 2; i++) {
            ys[i] = find_drop(img, w, h, xs[i], -1, -1);
            print_message("table edge at x=%d: found %.2f, truth %.2f\n", xs[i], ys[i],
                          truth_y_at(&t, w, h, xs[i]));
            assert_true(fabs(ys[i] - truth_y_at(&t, w, h, xs[i])) < 2.0);
        }
        double tilt = atan2(ys[0] - ys[1], (double)(xs[1] - xs[0])) * 180.0 / M_PI;
        assert_float_equal(tilt, t.horizon_deg, 0.2);
        /* the jug's box: outermost strong colour edges between the box rows */
        int bx0 = w, bx1 = -1, by0 = h, by1 = -1;
        for (int y = 1; y < h - 1; y++)
            for (int x = 1; x < w - 1; x++) {
                const uint8_t *p = img + ((size_t)y * (size_t)w + (size_t)x) * 4;
                double gx = fabs(ref_lum(p + 4) - ref_lum(p - 4));
                double gy = fabs(ref_lum(p + (size_t)w * 4) - ref_lum(p - (size_t)w * 4));
                double ty = truth_y_at(&t, w, h, x);
                if (y + 0.5 > ty - 4)
                    continue; /* the table edge and the grain of its front */
                if (gx > 0.03 || gy > 0.03) {
                    bx0 = x < bx0 ? x : bx0;
                    bx1 = x > bx1 ? x : bx1;
                    by0 = y < by0 ? y : by0;
                    by1 = y > by1 ? y : by1;
                }
            }
        double tx0 = (t.subject_x - t.subject_w / 2) * w, tx1 = (t.subject_x + t.subject_w / 2) * w;
        double ty0 = (t.subject_y - t.subject_h / 2) * h, ty1 = (t.subject_y + t.subject_h / 2) * h;
        print_message("jug box found x %d..%d y %d..%d, truth x %.1f..%.1f y %.1f..%.1f\n", bx0,
                      bx1 + 1, by0, by1 + 1, tx0, tx1, ty0, ty1);
        assert_true(fabs(bx0 - tx0) < 3 && fabs(bx1 + 1 - tx1) < 3);
        assert_true(fabs(by0 - ty0) < 3 && fabs(by1 + 1 - ty1) < 3);
    }
    free(img);
    cap_source_destroy(s);
}

static void test_source_dispatch(void **state)
{
    (void)state;
    char err[256];
    cap_source_opts o = {.w = 640, .h = 480};
    cap_source *s = cap_source_open("demo", &o, err, sizeof err);
    assert_non_null(strstr(cap_source_name(s), "harbour"));
    assert_false(cap_source_is_live(s));
    assert_float_equal(cap_source_fps(s), 30.0, 1e-9);
    cap_source_destroy(s);
    s = cap_source_open("demo:tabletop", &o, err, sizeof err);
    assert_non_null(strstr(cap_source_name(s), "tabletop"));
    cap_source_destroy(s);
    cap_source_destroy(NULL);
    assert_null(cap_source_open("demo:lighthouse", &o, err, sizeof err));
    assert_non_null(strstr(err, "demo:lighthouse"));
    assert_null(strchr(err, '\n'));
    /* neither a demo nor a file: the camera code answers, naming it */
    err[0] = '\0';
    assert_null(cap_source_open("/nonexistent/vfcoach-cam", &o, err, sizeof err));
    assert_non_null(strstr(err, "/nonexistent/vfcoach-cam"));
    assert_null(cap_source_open("", &o, err, sizeof err));
    assert_true(err[0] != '\0');
    uint8_t px[16];
    assert_int_equal(cap_demo_render(NULL, 0, px, 16, NULL), -EINVAL);
}

/* ---- stills ---- */

static const char *tmp_path(const char *name)
{
    static char p[512];
    snprintf(p, sizeof p, "%s/%s", g_tmpdir, name);
    return p;
}

static int tmpdir_setup(void **state)
{
    (void)state;
    snprintf(g_tmpdir, sizeof g_tmpdir, "/tmp/vfcoach-test-XXXXXX");
    return mkdtemp(g_tmpdir) ? 0 : -1;
}

static int tmpdir_teardown(void **state)
{
    (void)state;
    char cmd[300];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", g_tmpdir);
    return system(cmd) == 0 ? 0 : -1;
}

/* Writes a w x h PNG through SDL2_image; pixel (x, y) = f(x, y) as 0xRRGGBB. */
static void write_png(const char *path, int w, int h, uint32_t (*f)(int, int))
{
    SDL_Surface *s = SDL_CreateRGBSurfaceWithFormat(0, w, h, 32, SDL_PIXELFORMAT_XRGB8888);
    assert_non_null(s);
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
            ((uint32_t *)((uint8_t *)s->pixels + (size_t)y * (size_t)s->pitch))[x] = f(x, y);
    assert_int_equal(IMG_SavePNG(s, path), 0);
    SDL_FreeSurface(s);
}

static uint32_t pat_ramp(int x, int y)
{
    return (uint32_t)(x * 4 % 256) << 16 | (uint32_t)(y * 5 % 256) << 8 | (uint32_t)((x + y) % 256);
}
static uint32_t pat_red(int x, int y) { (void)x, (void)y; return 0xD02010; }
static uint32_t pat_green(int x, int y) { (void)x, (void)y; return 0x10C040; }
static uint32_t pat_blue(int x, int y) { (void)x, (void)y; return 0x1030E0; }

static void write_bytes(const char *path, const void *b, size_t n)
{
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    assert_int_equal(fwrite(b, 1, n, f), n);
    fclose(f);
}

static void test_image_load_png(void **state)
{
    (void)state;
    write_png(tmp_path("ramp.png"), 61, 47, pat_ramp);
    coach_frame f;
    char err[256];
    assert_int_equal(cap_image_load(tmp_path("ramp.png"), &f, err, sizeof err), 0);
    assert_int_equal(f.w, 61);
    assert_int_equal(f.h, 47);
    assert_int_equal(f.format, COACH_FMT_XRGB8888);
    /* PNG is lossless (W3C PNG specification, section 1): exact pixels back */
    for (int y = 0; y < 47; y++)
        for (int x = 0; x < 61; x++) {
            const uint8_t *p = f.data + (size_t)y * (size_t)f.stride + (size_t)x * 4;
            uint32_t v = (uint32_t)p[2] << 16 | (uint32_t)p[1] << 8 | p[0];
            assert_int_equal(v, pat_ramp(x, y));
        }
    cap_image_free(&f);
    assert_null(f.data);
    cap_image_free(NULL);
}

static void test_image_load_jpeg(void **state)
{
    (void)state;
    SDL_Surface *s = SDL_CreateRGBSurfaceWithFormat(0, 64, 32, 32, SDL_PIXELFORMAT_XRGB8888);
    for (int y = 0; y < 32; y++)
        for (int x = 0; x < 64; x++)
            ((uint32_t *)((uint8_t *)s->pixels + (size_t)y * (size_t)s->pitch))[x] =
                x < 32 ? 0x808080u : 0xC04020u;
    assert_int_equal(IMG_SaveJPG(s, tmp_path("two.jpg"), 95), 0);
    SDL_FreeSurface(s);
    coach_frame f;
    char err[256];
    assert_int_equal(cap_image_load(tmp_path("two.jpg"), &f, err, sizeof err), 0);
    assert_int_equal(f.w, 64);
    assert_int_equal(f.h, 32);
    /* lossy, so only near the block centres and within a few codes */
    const uint8_t *g = f.data + 16 * (size_t)f.stride + 12 * 4;
    const uint8_t *o = f.data + 16 * (size_t)f.stride + 52 * 4;
    assert_true(abs(g[0] - 0x80) <= 4 && abs(g[1] - 0x80) <= 4 && abs(g[2] - 0x80) <= 4);
    assert_true(abs(o[2] - 0xC0) <= 8 && abs(o[1] - 0x40) <= 8 && abs(o[0] - 0x20) <= 8);
    cap_image_free(&f);
}

static void test_image_load_errors(void **state)
{
    (void)state;
    coach_frame f;
    char err[256];
    /* a PNG signature followed by rubbish */
    static const uint8_t bad[] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1A, '\n', 0, 0, 0, 13,
                                  'I', 'H', 'D', 'R', 0, 0, 0, 9, 0, 0, 0, 9, 8, 2, 0, 0, 0,
                                  0xDE, 0xAD, 0xBE, 0xEF, 1, 2, 3, 4, 5};
    write_bytes(tmp_path("broken.png"), bad, sizeof bad);
    int rc = cap_image_load(tmp_path("broken.png"), &f, err, sizeof err);
    assert_true(rc < 0);
    assert_null(f.data);
    print_message("corrupt: %s\n", err);
    assert_non_null(strstr(err, "broken.png"));
    assert_null(strchr(err, '\n'));

    /* a good PNG cut short */
    write_png(tmp_path("whole.png"), 40, 30, pat_ramp);
    FILE *pf = fopen(tmp_path("whole.png"), "rb");
    static uint8_t whole[1 << 16];
    size_t nwhole = fread(whole, 1, sizeof whole, pf);
    fclose(pf);
    assert_true(nwhole > 100 && nwhole < sizeof whole);
    write_bytes(tmp_path("cut.png"), whole, nwhole - 40);
    assert_true(cap_image_load(tmp_path("cut.png"), &f, err, sizeof err) < 0);
    print_message("cut short: %s\n", err);
    assert_non_null(strstr(err, "cut.png"));
    assert_non_null(strstr(err, "damaged"));

    write_bytes(tmp_path("notes.txt"), "hello\n", 6);
    assert_int_equal(cap_image_load(tmp_path("notes.txt"), &f, err, sizeof err), -EINVAL);
    assert_non_null(strstr(err, "notes.txt"));
    assert_non_null(strstr(err, "not a PNG or JPEG"));

    assert_int_equal(cap_image_load(tmp_path("missing.png"), &f, err, sizeof err), -ENOENT);
    assert_non_null(strstr(err, "missing.png"));
    assert_non_null(strstr(err, strerror(ENOENT)));
}

static uint32_t frame_colour(const cap_frame *f)
{
    const uint8_t *p = f->view.data + (size_t)(f->view.h / 2) * (size_t)f->view.stride +
                       (size_t)(f->view.w / 2) * 4;
    return (uint32_t)p[2] << 16 | (uint32_t)p[1] << 8 | p[0];
}

static void test_still_folder_playback(void **state)
{
    (void)state;
    char dir[300];
    snprintf(dir, sizeof dir, "%s/album", g_tmpdir);
    assert_int_equal(mkdir(dir, 0700), 0);
    char p[400];
    snprintf(p, sizeof p, "%s/img10.png", dir); /* natural order: after img2 */
    write_png(p, 64, 64, pat_blue);
    snprintf(p, sizeof p, "%s/img1.png", dir);
    write_png(p, 80, 60, pat_red);
    snprintf(p, sizeof p, "%s/img2.png", dir);
    write_png(p, 120, 90, pat_green);
    static const uint8_t bad[] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1A, '\n', 0, 0, 0, 13,
                                  'I', 'H', 'D', 'R', 0, 0, 0, 9, 0, 0, 0, 9, 8, 2, 0, 0, 0, 7};
    snprintf(p, sizeof p, "%s/img3.png", dir);
    write_bytes(p, bad, sizeof bad);
    snprintf(p, sizeof p, "%s/readme.txt", dir);
    write_bytes(p, "x", 1);

    char err[256];
    cap_source_opts o = {.fps = 1}; /* one frame a second: 4 frames per still */
    cap_source *s = cap_source_open(dir, &o, err, sizeof err);
    if (!s)
        print_error("%s\n", err);
    assert_non_null(s);
    assert_false(cap_source_is_live(s));
    assert_true(cap_source_max_bytes(s) >= 120u * 90u * 4u);
    assert_non_null(strstr(s->note, "readme.txt")); /* skipped, said so */
    cap_mailbox *m = cap_mailbox_create(cap_source_max_bytes(s));
    static const uint32_t want[] = {0xD02010, 0x10C040, 0x1030E0, 0xD02010};
    static const int want_w[] = {80, 120, 64, 80};
    int saw_skip = 0;
    for (int i = 0; i < 16; i++) {
        cap_frame meta, f;
        memset(&meta, 0, sizeof meta);
        s->note[0] = '\0';
        assert_int_equal(s->ops->produce(s, m, &meta), 0);
        cap_mailbox_publish(m, &meta);
        if (strstr(s->note, "img3.png"))
            saw_skip = 1;
        assert_int_equal(cap_mailbox_take(m, &f), 0);
        assert_int_equal(f.seq, (uint64_t)i);
        assert_int_equal(f.view.w, want_w[i / 4]);
        assert_int_equal(frame_colour(&f), want[i / 4]);
        assert_false(f.truth.valid);
        cap_mailbox_release(m);
    }
    assert_true(saw_skip); /* the damaged one was skipped with a note */
    cap_mailbox_destroy(m);
    cap_source_destroy(s);

    /* a single still plays through the same path */
    snprintf(p, sizeof p, "%s/img2.png", dir);
    s = cap_source_open(p, &o, err, sizeof err);
    assert_non_null(s);
    assert_non_null(strstr(cap_source_name(s), "img2.png"));
    cap_source_destroy(s);
}

static uint32_t pat_checker(int x, int y)
{
    return ((x / 2 + y / 2) & 1) ? 0xFFFFFFu : 0x000000u;
}

static void test_still_large_shrunk(void **state)
{
    (void)state;
    /* wider than 3840: played at half size, each pixel the mean of 2x2 */
    write_png(tmp_path("wide.png"), 4002, 1000, pat_checker);
    char err[256];
    cap_source_opts o = {.fps = 30};
    cap_source *s = cap_source_open(tmp_path("wide.png"), &o, err, sizeof err);
    assert_non_null(s);
    assert_int_equal(cap_source_max_bytes(s), 2001u * 500u * 4u);
    cap_mailbox *m = cap_mailbox_create(cap_source_max_bytes(s));
    cap_frame meta, f;
    assert_int_equal(s->ops->produce(s, m, &meta), 0);
    cap_mailbox_publish(m, &meta);
    assert_int_equal(cap_mailbox_take(m, &f), 0);
    assert_int_equal(f.view.w, 2001);
    assert_int_equal(f.view.h, 500);
    /* 2x2 blocks of the 2-pixel checker are uniform: black or white */
    const uint8_t *p0 = f.view.data + 10 * (size_t)f.view.stride + 10 * 4;
    const uint8_t *p1 = f.view.data + 10 * (size_t)f.view.stride + 11 * 4;
    assert_true((p0[1] == 0 && p1[1] == 255) || (p0[1] == 255 && p1[1] == 0));
    cap_mailbox_release(m);
    cap_mailbox_destroy(m);
    cap_source_destroy(s);
    /* the analyse path keeps the full size */
    coach_frame full;
    assert_int_equal(cap_image_load(tmp_path("wide.png"), &full, err, sizeof err), 0);
    assert_int_equal(full.w, 4002);
    cap_image_free(&full);
    assert_int_equal(cap_image_load(g_tmpdir, &full, err, sizeof err), -EISDIR);
    assert_non_null(strstr(err, "folder"));
}

static void test_still_folder_errors(void **state)
{
    (void)state;
    char dir[300], err[256];
    snprintf(dir, sizeof dir, "%s/empty", g_tmpdir);
    assert_int_equal(mkdir(dir, 0700), 0);
    cap_source_opts o = {0};
    assert_null(cap_source_open(dir, &o, err, sizeof err));
    assert_non_null(strstr(err, dir));
    assert_non_null(strstr(err, "no PNG or JPEG"));
    /* only damaged images */
    char p[400];
    snprintf(p, sizeof p, "%s/a.jpg", dir);
    static const uint8_t junk[] = {0xFF, 0xD8, 0xFF, 0xC0, 0, 17, 8, 0, 16, 0, 16, 3, 1, 2, 3, 4};
    write_bytes(p, junk, sizeof junk);
    assert_null(cap_source_open(dir, &o, err, sizeof err));
    print_message("damaged folder: %s\n", err);
    assert_non_null(strstr(err, "a.jpg"));
    assert_null(strchr(err, '\n'));
}

/* ==== section B ==== */

#include <linux/videodev2.h>
#include <sys/eventfd.h>
#include <sys/mman.h>

#include "capture/v4l2_internal.h"

/* ---- a fake V4L2 device behind the ioctl seam ----
 * It answers the ioctls as the V4L2 API specification (kernel.org,
 * "Video for Linux API", sections on VIDIOC_ENUM_FMT, ENUM_FRAMESIZES,
 * ENUM_FRAMEINTERVALS, S_FMT, REQBUFS, QBUF/DQBUF) describes them: frame
 * intervals are seconds as numerator/denominator, so fps = den/num. */

typedef struct fk_mode {
    uint32_t fourcc;
    int w, h;
    int fps[8];                 /* discrete rates, 0-terminated */
} fk_mode;

typedef struct fk_dev {
    const fk_mode *modes;
    int nmodes;
    uint32_t emulated;          /* a fourcc listed with V4L2_FMT_FLAG_EMULATED */
    uint32_t stepwise;          /* a fourcc whose sizes are a stepwise range   */
    int no_enum_sizes;          /* a driver without ENUM_FRAMESIZES/INTERVALS  */
    uint32_t caps;              /* device_caps (0: video capture + streaming)  */
    int open_errno, s_fmt_errno, dqbuf_errno;
    mode_t stat_mode;           /* 0: a character device                       */
    uint32_t colorspace, ycbcr_enc, quantization;
    const uint8_t *frame;       /* what each dequeued buffer holds             */
    size_t frame_len;
    /* state */
    struct v4l2_pix_format cur;
    struct v4l2_fract tpf;
    int nbuf, queued[4], streaming;
    uint8_t *mem[4];
    size_t len;
    int open_fds, maps, frames;
} fk_dev;

static fk_dev *g_fk;

static int fk_open(const char *path, int flags)
{
    (void)path;
    (void)flags;
    if (g_fk->open_errno) {
        errno = g_fk->open_errno;
        return -1;
    }
    g_fk->open_fds++;
    return eventfd(0, EFD_CLOEXEC | EFD_NONBLOCK); /* a real descriptor, so poll() works */
}

static int fk_close(int fd)
{
    g_fk->open_fds--;
    return close(fd);
}

static void *fk_mmap(void *addr, size_t len, int prot, int flags, int fd, int64_t off)
{
    (void)addr;
    (void)prot;
    (void)flags;
    (void)fd;
    int i = (int)(off >> 20);
    if (i < 0 || i >= g_fk->nbuf || len != g_fk->len) {
        errno = EINVAL;
        return MAP_FAILED;
    }
    g_fk->maps++;
    return g_fk->mem[i];
}

static int fk_munmap(void *addr, size_t len)
{
    (void)addr;
    (void)len;
    g_fk->maps--;
    return 0;
}

static int fk_stat(const char *path, struct stat *st)
{
    (void)path;
    memset(st, 0, sizeof *st);
    st->st_mode = g_fk->stat_mode ? g_fk->stat_mode : (S_IFCHR | 0660);
    return 0;
}

static uint32_t fk_nth_fourcc(int idx)
{
    int seen = 0;
    for (int i = 0; i < g_fk->nmodes; i++) {
        int first = 1;
        for (int j = 0; j < i; j++)
            if (g_fk->modes[j].fourcc == g_fk->modes[i].fourcc)
                first = 0;
        if (first && seen++ == idx)
            return g_fk->modes[i].fourcc;
    }
    return 0;
}

static const fk_mode *fk_find(uint32_t fourcc, int w, int h)
{
    for (int i = 0; i < g_fk->nmodes; i++)
        if (g_fk->modes[i].fourcc == fourcc && (g_fk->stepwise == fourcc || (g_fk->modes[i].w == w && g_fk->modes[i].h == h)))
            return &g_fk->modes[i];
    return NULL;
}

static uint32_t fk_bpl(uint32_t fourcc, int w)
{
    switch (fourcc) {
    case V4L2_PIX_FMT_YUYV: case V4L2_PIX_FMT_UYVY: case V4L2_PIX_FMT_YVYU: return (uint32_t)w * 2;
    case V4L2_PIX_FMT_RGB24: case V4L2_PIX_FMT_BGR24: return (uint32_t)w * 3;
    case V4L2_PIX_FMT_NV12: case V4L2_PIX_FMT_NV21: case V4L2_PIX_FMT_YUV420: case V4L2_PIX_FMT_YVU420:
    case V4L2_PIX_FMT_GREY: return (uint32_t)w;
    default: return 0; /* compressed */
    }
}

static int fk_ioctl(int fd, unsigned long req, void *arg)
{
    (void)fd;
    fk_dev *d = g_fk;
    switch (req) {
    case VIDIOC_QUERYCAP: {
        struct v4l2_capability *c = arg;
        memset(c, 0, sizeof *c);
        snprintf((char *)c->driver, sizeof c->driver, "fakecam");
        snprintf((char *)c->card, sizeof c->card, "Bench Camera");
        snprintf((char *)c->bus_info, sizeof c->bus_info, "usb-0000:00:14.0-2");
        c->device_caps = d->caps ? d->caps : (V4L2_CAP_VIDEO_CAPTURE | V4L2_CAP_STREAMING);
        c->capabilities = c->device_caps | V4L2_CAP_DEVICE_CAPS;
        return 0;
    }
    case VIDIOC_ENUM_FMT: {
        struct v4l2_fmtdesc *f = arg;
        int n = 0;
        while (fk_nth_fourcc(n))
            n++;
        uint32_t cc = (int)f->index < n ? fk_nth_fourcc((int)f->index)
                      : (f->index == (uint32_t)n && d->emulated) ? d->emulated : 0;
        if (!cc || f->type != V4L2_BUF_TYPE_VIDEO_CAPTURE)
            break;
        f->pixelformat = cc;
        f->flags = cc == d->emulated ? V4L2_FMT_FLAG_EMULATED : 0;
        snprintf((char *)f->description, sizeof f->description, "fake %.4s", (const char *)&cc);
        return 0;
    }
    case VIDIOC_ENUM_FRAMESIZES: {
        struct v4l2_frmsizeenum *s = arg;
        if (d->no_enum_sizes)
            break;
        if (s->pixel_format == d->stepwise) {
            if (s->index)
                break;
            s->type = V4L2_FRMSIZE_TYPE_STEPWISE;
            s->stepwise = (struct v4l2_frmsize_stepwise){160, 3840, 16, 120, 2160, 8};
            return 0;
        }
        uint32_t k = 0;
        for (int i = 0; i < d->nmodes; i++)
            if (d->modes[i].fourcc == s->pixel_format && k++ == s->index) {
                s->type = V4L2_FRMSIZE_TYPE_DISCRETE;
                s->discrete.width = (uint32_t)d->modes[i].w;
                s->discrete.height = (uint32_t)d->modes[i].h;
                return 0;
            }
        break;
    }
    case VIDIOC_ENUM_FRAMEINTERVALS: {
        struct v4l2_frmivalenum *fi = arg;
        const fk_mode *m = fk_find(fi->pixel_format, (int)fi->width, (int)fi->height);
        if (d->no_enum_sizes || !m || fi->index >= 8 || !m->fps[fi->index])
            break;
        fi->type = V4L2_FRMIVAL_TYPE_DISCRETE;
        fi->discrete.numerator = 1;
        fi->discrete.denominator = (uint32_t)m->fps[fi->index];
        return 0;
    }
    case VIDIOC_TRY_FMT:
    case VIDIOC_S_FMT: {
        struct v4l2_format *f = arg;
        if (req == VIDIOC_S_FMT && d->s_fmt_errno) {
            errno = d->s_fmt_errno;
            return -1;
        }
        const fk_mode *m = fk_find(f->fmt.pix.pixelformat, (int)f->fmt.pix.width, (int)f->fmt.pix.height);
        if (!m)
            m = &d->modes[0];
        struct v4l2_pix_format p;
        memset(&p, 0, sizeof p);
        p.pixelformat = m->fourcc;
        p.width = d->stepwise == m->fourcc ? f->fmt.pix.width : (uint32_t)m->w;
        p.height = d->stepwise == m->fourcc ? f->fmt.pix.height : (uint32_t)m->h;
        p.field = V4L2_FIELD_NONE;
        p.bytesperline = fk_bpl(p.pixelformat, (int)p.width);
        p.sizeimage = !p.bytesperline ? p.width * p.height /* compressed: room for one JPEG */
                      : p.bytesperline == p.width && p.pixelformat != V4L2_PIX_FMT_GREY ? p.bytesperline * p.height * 3 / 2
                      : p.bytesperline * p.height;
        p.colorspace = d->colorspace;
        p.ycbcr_enc = d->ycbcr_enc;
        p.quantization = d->quantization;
        f->fmt.pix = p;
        if (req == VIDIOC_S_FMT)
            d->cur = p;
        return 0;
    }
    case VIDIOC_G_FMT: {
        struct v4l2_format *f = arg;
        f->fmt.pix = d->cur;
        return 0;
    }
    case VIDIOC_S_PARM:
    case VIDIOC_G_PARM: {
        struct v4l2_streamparm *p = arg;
        if (req == VIDIOC_S_PARM)
            d->tpf = p->parm.capture.timeperframe;
        p->parm.capture.capability = V4L2_CAP_TIMEPERFRAME;
        p->parm.capture.timeperframe = d->tpf;
        return 0;
    }
    case VIDIOC_REQBUFS: {
        struct v4l2_requestbuffers *r = arg;
        for (int i = 0; i < d->nbuf; i++)
            free(d->mem[i]);
        d->nbuf = r->count > 4 ? 4 : (int)r->count;
        r->count = (uint32_t)d->nbuf;
        d->len = d->cur.sizeimage;
        for (int i = 0; i < d->nbuf; i++) {
            d->mem[i] = calloc(1, d->len);
            d->queued[i] = 0;
        }
        return 0;
    }
    case VIDIOC_QUERYBUF: {
        struct v4l2_buffer *b = arg;
        if ((int)b->index >= d->nbuf)
            break;
        b->length = (uint32_t)d->len;
        b->m.offset = b->index << 20;
        return 0;
    }
    case VIDIOC_QBUF: {
        struct v4l2_buffer *b = arg;
        if ((int)b->index >= d->nbuf)
            break;
        d->queued[b->index] = 1;
        return 0;
    }
    case VIDIOC_DQBUF: {
        struct v4l2_buffer *b = arg;
        if (d->dqbuf_errno) {
            errno = d->dqbuf_errno;
            return -1;
        }
        for (int i = 0; i < d->nbuf; i++) {
            if (!d->queued[i] || !d->streaming)
                continue;
            d->queued[i] = 0;
            size_t n = d->frame_len < d->len ? d->frame_len : d->len;
            memcpy(d->mem[i], d->frame, n);
            b->index = (uint32_t)i;
            b->bytesused = (uint32_t)n;
            b->flags = V4L2_BUF_FLAG_TIMESTAMP_MONOTONIC;
            b->timestamp.tv_sec = 1000 + d->frames / 25;
            b->timestamp.tv_usec = (d->frames % 25) * 40000;
            b->sequence = (uint32_t)d->frames++;
            return 0;
        }
        errno = EAGAIN;
        return -1;
    }
    case VIDIOC_STREAMON:
        d->streaming = 1;
        return 0;
    case VIDIOC_STREAMOFF:
        d->streaming = 0;
        return 0;
    default:
        break;
    }
    errno = EINVAL;
    return -1;
}

static const cap_v4l2_io k_fk_io = {fk_open, fk_close, fk_ioctl, fk_mmap, fk_munmap, fk_stat};

static void fk_release(fk_dev *d)
{
    for (int i = 0; i < d->nbuf; i++)
        free(d->mem[i]);
    d->nbuf = 0;
}

/* A USB webcam as they commonly come (common practice, USB 2.0 bandwidth):
 * YUYV fast only at small sizes, MJPEG fast at every size, plus 4K MJPEG. */
static const fk_mode k_webcam[] = {
    {V4L2_PIX_FMT_YUYV, 640, 480, {30, 25, 15, 0}},
    {V4L2_PIX_FMT_YUYV, 1280, 720, {10, 5, 0}},
    {V4L2_PIX_FMT_YUYV, 1920, 1080, {5, 0}},
    {V4L2_PIX_FMT_MJPEG, 640, 480, {30, 25, 15, 0}},
    {V4L2_PIX_FMT_MJPEG, 1280, 720, {30, 25, 15, 0}},
    {V4L2_PIX_FMT_MJPEG, 1920, 1080, {30, 25, 15, 0}},
    {V4L2_PIX_FMT_MJPEG, 3840, 2160, {30, 0}},
    {V4L2_PIX_FMT_H264, 1920, 1080, {30, 0}},  /* compressed video: never used */
};

static int fk_choose(fk_dev *d, cap_v4l2_want want, cap_v4l2_mode *chosen, double *fps)
{
    g_fk = d;
    static cap_v4l2_mode modes[CAP_V4L2_MAX_MODES];
    int n = cap_v4l2_enum_modes(&k_fk_io, 0, modes, CAP_V4L2_MAX_MODES);
    if (n <= 0)
        return n ? n : -ENOENT;
    cap_v4l2_pick pick;
    int r = cap_v4l2_choose(modes, n, &want, &pick);
    if (r == 0) {
        *chosen = modes[pick.mode];
        *fps = pick.rate.num ? (double)pick.rate.den / pick.rate.num : 0;
    }
    return r;
}

static void test_v4l2_enum_skips_unusable(void **state)
{
    (void)state;
    fk_dev d = {.modes = k_webcam, .nmodes = 8, .emulated = V4L2_PIX_FMT_RGB24};
    g_fk = &d;
    cap_v4l2_mode modes[32];
    int n = cap_v4l2_enum_modes(&k_fk_io, 0, modes, 32);
    /* 7 YUYV/MJPEG modes; H.264 (compressed video) and the format libv4l2
     * only emulates (V4L2_FMT_FLAG_EMULATED) are left out */
    assert_int_equal(n, 7);
    for (int i = 0; i < n; i++) {
        assert_true(modes[i].fourcc == V4L2_PIX_FMT_YUYV || modes[i].fourcc == V4L2_PIX_FMT_MJPEG);
        assert_true(modes[i].nrates >= 1);
        for (int k = 1; k < modes[i].nrates; k++) /* fastest first */
            assert_true(cap_v4l2_mode_fps(&modes[i]) >= (double)modes[i].rates[k].den / modes[i].rates[k].num);
    }
    /* fps = denominator / numerator of the frame interval (V4L2 spec) */
    assert_true(fabs(cap_v4l2_mode_fps(&modes[0]) - 30.0) < 1e-9);
}

static void test_v4l2_choose_default_size(void **state)
{
    (void)state;
    fk_dev d = {.modes = k_webcam, .nmodes = 8};
    cap_v4l2_mode m;
    double fps;
    /* default: the largest size at >= 25 fps, capped at 1920x1080 (the
     * project's rule): 1080p, which only MJPEG gives at that rate; 4K is
     * offered at 30 fps but is over the cap */
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){0}, &m, &fps), 0);
    assert_int_equal(m.w, 1920);
    assert_int_equal(m.h, 1080);
    assert_int_equal(m.fourcc, V4L2_PIX_FMT_MJPEG);
    assert_true(fabs(fps - 30) < 1e-9);
}

static void test_v4l2_choose_cheapest_format(void **state)
{
    (void)state;
    fk_dev d = {.modes = k_webcam, .nmodes = 8};
    cap_v4l2_mode m;
    double fps;
    /* at 640x480 both reach 30 fps: YUYV passes through, MJPEG needs a decode */
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){.w = 640, .h = 480}, &m, &fps), 0);
    assert_int_equal(m.fourcc, V4L2_PIX_FMT_YUYV);
    assert_true(fabs(fps - 30) < 1e-9);
    /* at 1280x720 YUYV gives 10 fps only: MJPEG at 30 wins */
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){.w = 1280, .h = 720}, &m, &fps), 0);
    assert_int_equal(m.fourcc, V4L2_PIX_FMT_MJPEG);
    /* a wanted fourcc is honoured, and one not offered is refused */
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){.w = 1280, .h = 720, .fourcc = V4L2_PIX_FMT_YUYV}, &m, &fps), 0);
    assert_int_equal(m.fourcc, V4L2_PIX_FMT_YUYV);
    assert_true(fabs(fps - 10) < 1e-9);
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){.fourcc = V4L2_PIX_FMT_NV12}, &m, &fps), -ENOENT);
}

static void test_v4l2_choose_nearest_size_and_rate(void **state)
{
    (void)state;
    fk_dev d = {.modes = k_webcam, .nmodes = 8};
    cap_v4l2_mode m;
    double fps;
    /* 800x600 is not offered: 640x480 is nearer than 1280x720 */
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){.w = 800, .h = 600}, &m, &fps), 0);
    assert_int_equal(m.w, 640);
    assert_int_equal(m.h, 480);
    /* 24 fps wanted: 25 is the nearest offered rate */
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){.w = 640, .h = 480, .fps = 24}, &m, &fps), 0);
    assert_true(fabs(fps - 25) < 1e-9);
    /* 60 wanted at 1080p: the fastest there is, 30 */
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){.w = 1920, .h = 1080, .fps = 60}, &m, &fps), 0);
    assert_true(fabs(fps - 30) < 1e-9);
}

static void test_v4l2_choose_slow_and_stepwise(void **state)
{
    (void)state;
    /* a camera that never reaches 25 fps: the fastest size, not the largest */
    static const fk_mode slow[] = {
        {V4L2_PIX_FMT_YUYV, 640, 480, {15, 0}},
        {V4L2_PIX_FMT_YUYV, 1280, 720, {8, 0}},
    };
    fk_dev d = {.modes = slow, .nmodes = 2};
    cap_v4l2_mode m;
    double fps;
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){0}, &m, &fps), 0);
    assert_int_equal(m.w, 640);
    assert_true(fabs(fps - 15) < 1e-9);
    /* an HDMI capture card with a stepwise size range (V4L2 spec:
     * V4L2_FRMSIZE_TYPE_STEPWISE): Full HD is on the grid and is taken */
    static const fk_mode card[] = {{V4L2_PIX_FMT_NV12, 0, 0, {60, 30, 0}}};
    fk_dev c = {.modes = card, .nmodes = 1, .stepwise = V4L2_PIX_FMT_NV12};
    assert_int_equal(fk_choose(&c, (cap_v4l2_want){0}, &m, &fps), 0);
    assert_int_equal(m.w, 1920);
    assert_int_equal(m.h, 1080);
    assert_true(fabs(fps - 30) < 1e-9);
    assert_int_equal(fk_choose(&c, (cap_v4l2_want){.w = 1280, .h = 720, .fps = 60}, &m, &fps), 0);
    assert_int_equal(m.w, 1280);
    assert_true(fabs(fps - 60) < 1e-9);
}

/* A driver that cannot enumerate sizes (both ioctls are optional in the
 * V4L2 spec): the size VIDIOC_TRY_FMT settles on and the current rate. */
static void test_v4l2_enum_without_framesizes(void **state)
{
    (void)state;
    static const fk_mode one[] = {{V4L2_PIX_FMT_YUYV, 1280, 720, {15, 0}}};
    fk_dev d = {.modes = one, .nmodes = 1, .no_enum_sizes = 1, .tpf = {1, 15}};
    cap_v4l2_mode m;
    double fps;
    assert_int_equal(fk_choose(&d, (cap_v4l2_want){0}, &m, &fps), 0);
    assert_int_equal(m.w, 1280);
    assert_int_equal(m.h, 720);
    assert_int_equal(m.nrates, 1);
    assert_true(fabs(fps - 15) < 1e-9);
}

static void assert_one_line_naming(const char *err, const char *dev, const char *cause)
{
    assert_non_null(strstr(err, dev));
    assert_true(strncmp(err, dev, strlen(dev)) == 0);
    assert_null(strchr(err, '\n'));
    if (!strstr(err, cause))
        fail_msg("'%s' lacks '%s'", err, cause);
}

static void test_v4l2_errno_messages(void **state)
{
    (void)state;
    char buf[320];
    cap_v4l2_describe_error(buf, sizeof buf, "/dev/video0", "open", EACCES);
    assert_one_line_naming(buf, "/dev/video0", "permission denied");
    assert_non_null(strstr(buf, "'video' group"));
    assert_non_null(strstr(buf, "udev rule"));
    cap_v4l2_describe_error(buf, sizeof buf, "/dev/video0", "set the format", EBUSY);
    assert_one_line_naming(buf, "/dev/video0", "another program");
    cap_v4l2_describe_error(buf, sizeof buf, "/dev/video7", "open", ENOENT);
    assert_one_line_naming(buf, "/dev/video7", "no such device");
    cap_v4l2_describe_error(buf, sizeof buf, "/dev/null", "query the device", ENOTTY);
    assert_one_line_naming(buf, "/dev/null", "not a V4L2 video device");
    cap_v4l2_describe_error(buf, sizeof buf, "/tmp", "open", EISDIR);
    assert_one_line_naming(buf, "/tmp", "is a directory");
    /* ENOSPC from STREAMON is how UVC reports missing USB bandwidth
     * (Linux uvcvideo driver, uvc_video.c, recalled from memory) */
    cap_v4l2_describe_error(buf, sizeof buf, "/dev/video0", "start streaming", ENOSPC);
    assert_one_line_naming(buf, "/dev/video0", "USB bandwidth");
    cap_v4l2_describe_error(buf, sizeof buf, "/dev/video0", "open", ELOOP);
    assert_one_line_naming(buf, "/dev/video0", strerror(ELOOP));
    /* a tiny buffer still gets a terminated prefix */
    char small[12];
    cap_v4l2_describe_error(small, sizeof small, "/dev/video0", "open", EACCES);
    assert_int_equal(strlen(small), sizeof small - 1);
}

static void test_v4l2_open_bad_devices(void **state)
{
    (void)state;
    static const fk_mode one[] = {{V4L2_PIX_FMT_YUYV, 640, 480, {30, 0}}};
    char err[320];
    cap_source_opts o = {0};
    fk_dev d = {.modes = one, .nmodes = 1, .open_errno = EACCES};
    g_fk = &d;
    assert_null(cap_v4l2_open_io(&k_fk_io, "/dev/video0", &o, err, sizeof err));
    assert_one_line_naming(err, "/dev/video0", "permission denied");

    d = (fk_dev){.modes = one, .nmodes = 1, .stat_mode = S_IFDIR | 0755};
    assert_null(cap_v4l2_open_io(&k_fk_io, "/srv/shots", &o, err, sizeof err));
    assert_one_line_naming(err, "/srv/shots", "is a directory");

    d = (fk_dev){.modes = one, .nmodes = 1, .stat_mode = S_IFREG | 0644};
    assert_null(cap_v4l2_open_io(&k_fk_io, "/home/a/clip.raw", &o, err, sizeof err));
    assert_one_line_naming(err, "/home/a/clip.raw", "not a camera");

    /* a UVC camera's second node carries metadata only (V4L2_CAP_META_CAPTURE) */
    d = (fk_dev){.modes = one, .nmodes = 1, .caps = V4L2_CAP_META_CAPTURE | V4L2_CAP_STREAMING};
    assert_null(cap_v4l2_open_io(&k_fk_io, "/dev/video1", &o, err, sizeof err));
    assert_one_line_naming(err, "/dev/video1", "without video capture (metadata)");
    assert_int_equal(d.open_fds, 0);

    d = (fk_dev){.modes = one, .nmodes = 1, .s_fmt_errno = EBUSY};
    assert_null(cap_v4l2_open_io(&k_fk_io, "/dev/video0", &o, err, sizeof err));
    assert_one_line_naming(err, "/dev/video0", "busy");
    assert_int_equal(d.open_fds, 0);
    fk_release(&d);
}

/* Streams YUYV from the fake device into a mailbox: the frame passes through
 * with the driver's colour information and timestamp; an unplug reads as
 * -ENODEV; destroy leaves no descriptor or mapping behind. */
static void test_v4l2_stream_passthrough(void **state)
{
    (void)state;
    static const fk_mode one[] = {{V4L2_PIX_FMT_YUYV, 64, 48, {30, 25, 0}}};
    static uint8_t frame[64 * 48 * 2];
    for (size_t i = 0; i < sizeof frame; i++)
        frame[i] = (uint8_t)(i * 7);
    fk_dev d = {.modes = one, .nmodes = 1, .frame = frame, .frame_len = sizeof frame,
                .colorspace = V4L2_COLORSPACE_REC709, .quantization = V4L2_QUANTIZATION_FULL_RANGE};
    g_fk = &d;
    char err[320];
    cap_source_opts o = {.fps = 25};
    cap_source *s = cap_v4l2_open_io(&k_fk_io, "/dev/video0", &o, err, sizeof err);
    assert_non_null(s);
    assert_int_equal(d.open_fds, 1);
    assert_int_equal(d.maps, d.nbuf);
    assert_true(d.nbuf >= 2);
    assert_true(fabs(s->fps - 25) < 1e-9);
    assert_int_equal(d.tpf.numerator, 1);
    assert_int_equal(d.tpf.denominator, 25);
    assert_int_equal(s->max_bytes, sizeof frame);
    assert_true(s->ops->poll_fd(s) >= 0);
    cap_mailbox *mb = cap_mailbox_create(s->max_bytes);
    assert_non_null(mb);
    for (int k = 0; k < 3; k++) {
        cap_frame f;
        assert_int_equal(s->ops->produce(s, mb, &f), 0);
        assert_int_equal(f.view.format, COACH_FMT_YUYV);
        assert_int_equal(f.view.w, 64);
        assert_int_equal(f.view.h, 48);
        assert_int_equal(f.view.stride, 128);
        assert_memory_equal(f.view.data, frame, sizeof frame);
        /* Rec. 709 colorspace → BT.709 matrix; explicit full range (V4L2 spec, colorspaces) */
        assert_int_equal(f.view.matrix, COACH_MATRIX_BT709);
        assert_int_equal(f.view.range, COACH_RANGE_FULL);
        assert_int_equal(f.seq, (uint64_t)k);
        assert_true(fabs(f.t_capture - (1000.0 + k * 0.04)) < 1e-6); /* the driver's timestamp */
        cap_mailbox_publish(mb, &f);
    }
    d.dqbuf_errno = ENODEV; /* unplugged: VIDIOC_DQBUF fails with ENODEV (V4L2 spec) */
    cap_frame f;
    assert_int_equal(s->ops->produce(s, mb, &f), -ENODEV);
    assert_non_null(strstr(s->note, "waiting for the same camera"));
    cap_source_destroy(s);
    assert_int_equal(d.open_fds, 0);
    assert_int_equal(d.maps, 0);
    cap_mailbox_destroy(mb);
    fk_release(&d);
}

static void test_v4l2_colour_defaults(void **state)
{
    (void)state;
    coach_matrix m;
    coach_range r;
    /* Defaults per the V4L2 spec's colorspace section (videodev2.h
     * V4L2_MAP_YCBCR_ENC_DEFAULT / V4L2_MAP_QUANTIZATION_DEFAULT): sRGB →
     * BT.601 limited; JPEG → BT.601 full; Rec. 709 → BT.709 limited */
    cap_v4l2_colour(V4L2_COLORSPACE_SRGB, V4L2_YCBCR_ENC_DEFAULT, V4L2_QUANTIZATION_DEFAULT, &m, &r);
    assert_int_equal(m, COACH_MATRIX_BT601);
    assert_int_equal(r, COACH_RANGE_LIMITED);
    cap_v4l2_colour(V4L2_COLORSPACE_JPEG, V4L2_YCBCR_ENC_DEFAULT, V4L2_QUANTIZATION_DEFAULT, &m, &r);
    assert_int_equal(m, COACH_MATRIX_BT601);
    assert_int_equal(r, COACH_RANGE_FULL);
    cap_v4l2_colour(V4L2_COLORSPACE_REC709, V4L2_YCBCR_ENC_DEFAULT, V4L2_QUANTIZATION_DEFAULT, &m, &r);
    assert_int_equal(m, COACH_MATRIX_BT709);
    assert_int_equal(r, COACH_RANGE_LIMITED);
    cap_v4l2_colour(V4L2_COLORSPACE_SRGB, V4L2_YCBCR_ENC_709, V4L2_QUANTIZATION_FULL_RANGE, &m, &r);
    assert_int_equal(m, COACH_MATRIX_BT709);
    assert_int_equal(r, COACH_RANGE_FULL);
}

static cap_dev_id dev_id(const char *serial, const char *id_path, const char *parent, int index,
                         const char *card, const char *bus, const char *node)
{
    cap_dev_id id;
    memset(&id, 0, sizeof id);
    snprintf(id.serial, sizeof id.serial, "%s", serial);
    snprintf(id.id_path, sizeof id.id_path, "%s", id_path);
    snprintf(id.parent, sizeof id.parent, "%s", parent);
    snprintf(id.card, sizeof id.card, "%s", card);
    snprintf(id.bus, sizeof id.bus, "%s", bus);
    snprintf(id.node, sizeof id.node, "%s", node);
    id.index = index;
    return id;
}

static void test_replug_matcher(void **state)
{
    (void)state;
    cap_dev_id want = dev_id("Acme_Desk_Cam_0A1B", "pci-0000:00:14.0-usb-0:2:1.0",
                             "/sys/devices/pci0000:00/0000:00:14.0/usb1/1-2/1-2:1.0", 0, "Desk Cam", "usb-0000:00:14.0-2",
                             "/dev/video0");
    /* the same camera back under another node number */
    cap_dev_id h = want;
    snprintf(h.node, sizeof h.node, "/dev/video4");
    assert_true(cap_dev_match(&want, &h));
    /* moved to another port: the serial follows it */
    h = dev_id("Acme_Desk_Cam_0A1B", "pci-0000:00:14.0-usb-0:3:1.0", "/sys/devices/x/1-3:1.0", 0, "Desk Cam",
               "usb-0000:00:14.0-3", "/dev/video2");
    assert_true(cap_dev_match(&want, &h));
    /* an identical model with another serial in the same port is another camera */
    h = dev_id("Acme_Desk_Cam_77FF", want.id_path, want.parent, 0, "Desk Cam", want.bus, "/dev/video0");
    assert_false(cap_dev_match(&want, &h));
    /* the same camera's metadata node (index 1) is not its capture node */
    h = want;
    h.index = 1;
    assert_false(cap_dev_match(&want, &h));
    /* no serial: the port (ID_PATH) decides */
    cap_dev_id w2 = dev_id("", "pci-0000:00:14.0-usb-0:2:1.0", "", 0, "Desk Cam", "usb-0000:00:14.0-2", "/dev/video0");
    h = dev_id("", "pci-0000:00:14.0-usb-0:2:1.0", "", 0, "Desk Cam", "usb-0000:00:14.0-2", "/dev/video3");
    assert_true(cap_dev_match(&w2, &h));
    h = dev_id("", "pci-0000:00:14.0-usb-0:4:1.0", "", 0, "Desk Cam", "usb-0000:00:14.0-4", "/dev/video3");
    assert_false(cap_dev_match(&w2, &h));
    /* no udev daemon (no ID_PATH, no serial): the parent device and index */
    cap_dev_id w3 = dev_id("", "", "/sys/devices/platform/vivid.0", 0, "vivid", "platform:vivid-000", "/dev/video0");
    h = dev_id("", "", "/sys/devices/platform/vivid.0", 0, "vivid", "platform:vivid-000", "/dev/video5");
    assert_true(cap_dev_match(&w3, &h));
    h = dev_id("", "", "/sys/devices/platform/vivid.1", 0, "vivid", "platform:vivid-001", "/dev/video5");
    assert_false(cap_dev_match(&w3, &h));
    /* several cameras under one parent device (Linux 6.1 puts every vivid
     * instance under platform/vivid.0, seen in the VM check): bus_info tells */
    h = dev_id("", "", "/sys/devices/platform/vivid.0", 0, "vivid", "platform:vivid-001", "/dev/video8");
    assert_false(cap_dev_match(&w3, &h));
    /* nothing but QUERYCAP: bus and card */
    cap_dev_id w4 = dev_id("", "", "", -1, "Desk Cam", "usb-0000:00:14.0-2", "/dev/video0");
    h = dev_id("", "", "", -1, "Desk Cam", "usb-0000:00:14.0-2", "/dev/video1");
    assert_true(cap_dev_match(&w4, &h));
    h = dev_id("", "", "", -1, "Other Cam", "usb-0000:00:14.0-2", "/dev/video1");
    assert_false(cap_dev_match(&w4, &h));
    /* nothing known at all never matches */
    cap_dev_id none = dev_id("", "", "", -1, "", "", "");
    assert_false(cap_dev_match(&none, &none));
}

/* A test image with colour, gradients and edges. */
static SDL_Surface *make_scene_rgb24(int w, int h)
{
    SDL_Surface *s = SDL_CreateRGBSurfaceWithFormat(0, w, h, 24, SDL_PIXELFORMAT_RGB24);
    if (!s)
        return NULL;
    for (int y = 0; y < h; y++) {
        uint8_t *row = (uint8_t *)s->pixels + (size_t)y * (size_t)s->pitch;
        for (int x = 0; x < w; x++) {
            int sky = y < h / 2;
            row[3 * x + 0] = (uint8_t)(sky ? 60 + x * 100 / w : 180);
            row[3 * x + 1] = (uint8_t)(sky ? 120 + y * 100 / h : 140 - x * 60 / w);
            row[3 * x + 2] = (uint8_t)(sky ? 220 : 60);
        }
    }
    return s;
}

static uint8_t *read_all(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    uint8_t *b = n > 0 ? malloc((size_t)n) : NULL;
    if (b && fread(b, 1, (size_t)n, f) != (size_t)n) {
        free(b);
        b = NULL;
    }
    fclose(f);
    *len = b ? (size_t)n : 0;
    return b;
}

/* MJPEG frames through our libv4lconvert instance, created over the seam
 * with v4lconvert_create_with_dev_ops() on the fake device, then the whole
 * source path (DQBUF → convert into the mailbox).  Reference: the same JPEG
 * decoded by SDL2_image (libjpeg-turbo). */
static void test_v4l2_mjpeg_conversion(void **state)
{
    (void)state;
    const int w = 96, h = 64;
    SDL_Surface *img = make_scene_rgb24(w, h);
    assert_non_null(img);
    char path[] = "/tmp/vfcoach-mjpeg-XXXXXX";
    int tfd = mkstemp(path);
    assert_true(tfd >= 0);
    close(tfd);
    assert_int_equal(IMG_SaveJPG(img, path, 90), 0);
    SDL_FreeSurface(img);
    size_t jlen = 0;
    uint8_t *jpeg = read_all(path, &jlen);
    assert_non_null(jpeg);
    SDL_Surface *ref0 = IMG_Load(path);
    unlink(path);
    assert_non_null(ref0);
    SDL_Surface *ref = SDL_ConvertSurfaceFormat(ref0, SDL_PIXELFORMAT_RGB24, 0);
    SDL_FreeSurface(ref0);
    assert_non_null(ref);

    static const fk_mode mj[] = {{V4L2_PIX_FMT_MJPEG, 96, 64, {30, 0}}};
    fk_dev d = {.modes = mj, .nmodes = 1, .frame = jpeg, .frame_len = jlen, .colorspace = V4L2_COLORSPACE_JPEG};
    g_fk = &d;
    char err[320];
    cap_source_opts o = {0};
    cap_source *s = cap_v4l2_open_io(&k_fk_io, "/dev/video0", &o, err, sizeof err);
    if (!s)
        fail_msg("%s", err);
    assert_int_equal(cap_v4l2_source_fourcc(s), V4L2_PIX_FMT_MJPEG);
    assert_int_equal(s->max_bytes, (size_t)w * h * 3);
    cap_mailbox *mb = cap_mailbox_create(s->max_bytes);
    cap_frame f;
    assert_int_equal(s->ops->produce(s, mb, &f), 0);
    assert_int_equal(f.view.format, COACH_FMT_RGB24);
    assert_int_equal(f.view.stride, w * 3);
    double sum = 0;
    int worst = 0;
    for (int y = 0; y < h; y++) {
        const uint8_t *a = f.view.data + (size_t)y * (size_t)f.view.stride;
        const uint8_t *b = (const uint8_t *)ref->pixels + (size_t)y * (size_t)ref->pitch;
        for (int x = 0; x < w * 3; x++) {
            int dd = abs((int)a[x] - (int)b[x]);
            sum += dd;
            if (dd > worst)
                worst = dd;
        }
    }
    double mean = sum / (w * h * 3);
    /* two libjpeg decodes of one file differ only by IDCT and chroma
     * upsampling choices: a few levels at most */
    if (mean > 1.5 || worst > 16)
        fail_msg("MJPEG decode differs from SDL2_image: mean %.2f, worst %d", mean, worst);
    /* a corrupt frame is skipped, not fatal */
    memset(jpeg + jlen / 2, 0, jlen / 2);
    int r = s->ops->produce(s, mb, &f);
    assert_true(r == 0 || r == -EAGAIN);
    cap_source_destroy(s);
    assert_int_equal(d.open_fds, 0);
    assert_int_equal(d.maps, 0);
    cap_mailbox_destroy(mb);
    SDL_FreeSurface(ref);
    free(jpeg);
    fk_release(&d);
}

/* UYVY, YVYU, NV21, YU12 and YV12 through the source: reordered into the
 * YUYV / NV12 byte layouts the V4L2 specification's pixel format pages give
 * (packed YUV 4:2:2 and planar/semi-planar YUV 4:2:0 tables), colour
 * information kept (limited range here, as the driver said). */
static void test_v4l2_repack_layouts(void **state)
{
    (void)state;
    enum { W = 4, H = 4 };
    uint8_t Y[H][W], Cb[H / 2][W / 2], Cr[H / 2][W / 2];
    for (int y = 0; y < H; y++)
        for (int x = 0; x < W; x++)
            Y[y][x] = (uint8_t)(16 + 10 * y + x);
    for (int y = 0; y < H / 2; y++)
        for (int x = 0; x < W / 2; x++) {
            Cb[y][x] = (uint8_t)(100 + 10 * y + x);
            Cr[y][x] = (uint8_t)(200 + 10 * y + x);
        }
    /* the expected outputs; 4:2:2 uses chroma row y/2 for both rows */
    uint8_t yuyv[H * W * 2], nv12[W * H + W * H / 2];
    for (int y = 0; y < H; y++)
        for (int x = 0; x < W / 2; x++) {
            uint8_t *d = yuyv + y * W * 2 + x * 4;
            d[0] = Y[y][2 * x]; d[1] = Cb[y / 2][x]; d[2] = Y[y][2 * x + 1]; d[3] = Cr[y / 2][x];
        }
    memcpy(nv12, Y, sizeof Y);
    for (int y = 0; y < H / 2; y++)
        for (int x = 0; x < W / 2; x++) {
            nv12[W * H + y * W + 2 * x] = Cb[y][x];
            nv12[W * H + y * W + 2 * x + 1] = Cr[y][x];
        }
    struct { uint32_t fourcc; const char *spec; uint8_t src[W * H * 2]; size_t len; coach_format out; } cases[5];
    memset(cases, 0, sizeof cases);
    cases[0].fourcc = V4L2_PIX_FMT_UYVY; cases[0].spec = "/dev/video0@UYVY";
    cases[1].fourcc = V4L2_PIX_FMT_YVYU; cases[1].spec = "/dev/video0@YVYU";
    cases[2].fourcc = V4L2_PIX_FMT_NV21; cases[2].spec = "/dev/video0@NV21";
    cases[3].fourcc = V4L2_PIX_FMT_YUV420; cases[3].spec = "/dev/video0@YU12";
    cases[4].fourcc = V4L2_PIX_FMT_YVU420; cases[4].spec = "/dev/video0@YV12";
    for (int y = 0; y < H; y++)
        for (int x = 0; x < W / 2; x++) {
            uint8_t *u = cases[0].src + y * W * 2 + x * 4, *v = cases[1].src + y * W * 2 + x * 4;
            u[0] = Cb[y / 2][x]; u[1] = Y[y][2 * x]; u[2] = Cr[y / 2][x]; u[3] = Y[y][2 * x + 1];
            v[0] = Y[y][2 * x]; v[1] = Cr[y / 2][x]; v[2] = Y[y][2 * x + 1]; v[3] = Cb[y / 2][x];
        }
    cases[0].len = cases[1].len = W * H * 2;
    cases[0].out = cases[1].out = COACH_FMT_YUYV;
    for (int k = 2; k < 5; k++) {
        memcpy(cases[k].src, Y, sizeof Y);
        cases[k].len = W * H * 3 / 2;
        cases[k].out = COACH_FMT_NV12;
    }
    for (int y = 0; y < H / 2; y++)
        for (int x = 0; x < W / 2; x++) {
            cases[2].src[W * H + y * W + 2 * x] = Cr[y][x];      /* NV21: CrCb pairs */
            cases[2].src[W * H + y * W + 2 * x + 1] = Cb[y][x];
            cases[3].src[W * H + y * W / 2 + x] = Cb[y][x];      /* YU12: Cb plane, then Cr */
            cases[3].src[W * H + W * H / 4 + y * W / 2 + x] = Cr[y][x];
            cases[4].src[W * H + y * W / 2 + x] = Cr[y][x];      /* YV12: Cr plane, then Cb */
            cases[4].src[W * H + W * H / 4 + y * W / 2 + x] = Cb[y][x];
        }
    for (int k = 0; k < 5; k++) {
        fk_mode m[1] = {{cases[k].fourcc, W, H, {30, 0}}};
        fk_dev d = {.modes = m, .nmodes = 1, .frame = cases[k].src, .frame_len = cases[k].len,
                    .colorspace = V4L2_COLORSPACE_SRGB};
        g_fk = &d;
        char err[320];
        cap_source_opts o = {0};
        cap_source *s = cap_v4l2_open_io(&k_fk_io, cases[k].spec, &o, err, sizeof err);
        if (!s)
            fail_msg("%s: %s", cases[k].spec, err);
        assert_int_equal(cap_v4l2_source_fourcc(s), cases[k].fourcc);
        cap_mailbox *mb = cap_mailbox_create(s->max_bytes);
        cap_frame f;
        assert_int_equal(s->ops->produce(s, mb, &f), 0);
        assert_int_equal(f.view.format, cases[k].out);
        assert_int_equal(f.view.range, COACH_RANGE_LIMITED);
        assert_int_equal(f.view.matrix, COACH_MATRIX_BT601);
        if (cases[k].out == COACH_FMT_YUYV) {
            assert_int_equal(f.view.stride, W * 2);
            assert_memory_equal(f.view.data, yuyv, sizeof yuyv);
        } else {
            assert_int_equal(f.view.stride, W);
            assert_null(f.view.data2); /* CbCr plane right after the Y rows */
            assert_memory_equal(f.view.data, nv12, sizeof nv12);
        }
        cap_source_destroy(s);
        cap_mailbox_destroy(mb);
        assert_int_equal(d.open_fds, 0);
        fk_release(&d);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        /* ---- section A ---- */
        cmocka_unit_test(test_mailbox_drop_counting),
        cmocka_unit_test(test_mailbox_newest_wins),
        cmocka_unit_test(test_mailbox_reader_buffer_kept),
        cmocka_unit_test(test_mailbox_producer_thread),
        cmocka_unit_test(test_thread_stop_paced_demo),
        cmocka_unit_test(test_thread_stop_silent_device),
        cmocka_unit_test(test_thread_lost_then_back),
        cmocka_unit_test(test_thread_stop_while_recovering),
        cmocka_unit_test(test_thread_fatal_error_ends),
        cmocka_unit_test(test_demo_deterministic),
        cmocka_unit_test(test_demo_sizes),
        cmocka_unit_test(test_demo_exposure_one_stop),
        cmocka_unit_test(test_demo_horizon_truth),
        cmocka_unit_test(test_demo_blur_edge_width),
        cmocka_unit_test(test_demo_boat_box),
        cmocka_unit_test_setup_teardown(test_demo_blur_matches_opencv, tmpdir_setup, tmpdir_teardown),
        cmocka_unit_test(test_demo_tabletop_truth),
        cmocka_unit_test(test_source_dispatch),
        cmocka_unit_test_setup_teardown(test_image_load_png, tmpdir_setup, tmpdir_teardown),
        cmocka_unit_test_setup_teardown(test_image_load_jpeg, tmpdir_setup, tmpdir_teardown),
        cmocka_unit_test_setup_teardown(test_image_load_errors, tmpdir_setup, tmpdir_teardown),
        cmocka_unit_test_setup_teardown(test_still_folder_playback, tmpdir_setup, tmpdir_teardown),
        cmocka_unit_test_setup_teardown(test_still_large_shrunk, tmpdir_setup, tmpdir_teardown),
        cmocka_unit_test_setup_teardown(test_still_folder_errors, tmpdir_setup, tmpdir_teardown),
        /* ---- section B ---- */
        cmocka_unit_test(test_v4l2_enum_skips_unusable),
        cmocka_unit_test(test_v4l2_choose_default_size),
        cmocka_unit_test(test_v4l2_choose_cheapest_format),
        cmocka_unit_test(test_v4l2_choose_nearest_size_and_rate),
        cmocka_unit_test(test_v4l2_choose_slow_and_stepwise),
        cmocka_unit_test(test_v4l2_enum_without_framesizes),
        cmocka_unit_test(test_v4l2_errno_messages),
        cmocka_unit_test(test_v4l2_open_bad_devices),
        cmocka_unit_test(test_v4l2_stream_passthrough),
        cmocka_unit_test(test_v4l2_colour_defaults),
        cmocka_unit_test(test_replug_matcher),
        cmocka_unit_test(test_v4l2_mjpeg_conversion),
        cmocka_unit_test(test_v4l2_repack_layouts),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
