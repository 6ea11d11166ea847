/* vfcoach inspect: the composition analysis's internals for one still, for
 * the cross-checks against reference libraries (tests/check_compose.sh):
 * the strongest Hough line in full-resolution pixels (the x cos(theta) +
 * y sin(theta) = rho form with theta in [0, 180) degrees, origin at the
 * centre of the top-left pixel) and, with --saliency, the 64x64 saliency
 * map as a 16-bit PGM. */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "capture/capture.h"
#include "coach/app.h"
#include "coach/coach_internal.h"

/* Writes a 16-bit binary PGM through a temporary name, then renames. */
static int write_pgm16(const char *path, const float *m, int w, int h, char *err, size_t errlen)
{
    char tmp[4096];
    if (snprintf(tmp, sizeof tmp, "%s.tmp%ld", path, (long)getpid()) >= (int)sizeof tmp) {
        snprintf(err, errlen, "%s: path too long", path);
        return -ENAMETOOLONG;
    }
    FILE *f = fopen(tmp, "wb");
    if (!f) {
        snprintf(err, errlen, "%.400s: cannot create a temporary file beside it: %s", path, strerror(errno));
        return -errno;
    }
    fprintf(f, "P5\n%d %d\n65535\n", w, h);
    for (int i = 0; i < w * h; i++) {
        double v = m[i] < 0 ? 0 : m[i] > 1 ? 1 : m[i];
        unsigned q = (unsigned)lrint(v * 65535.0);
        fputc((int)(q >> 8), f);
        fputc((int)(q & 255), f);
    }
    int bad = ferror(f);
    if (fclose(f) || bad) {
        snprintf(err, errlen, "%.400s: write failed", path);
        remove(tmp);
        return -EIO;
    }
    if (rename(tmp, path)) {
        snprintf(err, errlen, "%s: cannot rename into place: %s", path, strerror(errno));
        remove(tmp);
        return -errno;
    }
    return 0;
}

static int inspect_one(const char *file, const char *sal_out)
{
    char err[512];
    coach_frame f;
    if (cap_image_load(file, &f, err, sizeof err)) {
        fprintf(stderr, "vfcoach inspect: %s\n", err);
        return 1;
    }
    int rc = 1, s, aw, ah;
    coach_tone_geometry(f.w, f.h, &s, &aw, &ah);
    coach_tone *tone = coach_tone_create(f.w, f.h);
    coach_compose *comp = coach_compose_create(aw, ah);
    coach_config cfg;
    coach_config_default(&cfg);
    coach_result res;
    coach_aimg img;
    memset(&res, 0, sizeof res);
    if (!tone || !comp) {
        fprintf(stderr, "vfcoach inspect: %s: out of memory\n", file);
        goto out;
    }
    if (coach_tone_run(tone, &f, &res, &img)) {
        fprintf(stderr, "vfcoach inspect: %s: cannot analyse this image\n", file);
        goto out;
    }
    coach_compose_run(comp, &img, f.w, f.h, 0.0, &cfg, &res);
    const coach_level_est *le = coach_compose_level(comp);
    printf("{\"file\":\"");
    for (const char *p = file; *p; p++)
        if (*p == '"' || *p == '\\')
            printf("\\%c", *p);
        else if ((unsigned char)*p >= 0x20)
            putchar(*p);
    printf("\",\"width\":%d,\"height\":%d,\"scale\":%d,\"analysis\":[%d,%d]", f.w, f.h, img.scale,
           img.w, img.h);
    if (le && le->has_peak) {
        /* Analysis pixel i spans full-res [i*s, (i+1)*s): x_a = (x_f + 0.5)/s - 0.5. */
        double th = le->peak_theta_deg * M_PI / 180.0, c = cos(th), sn = sin(th);
        double rho = img.scale * (le->peak_rho + 0.5 * (c + sn)) - 0.5 * (c + sn);
        printf(",\"hough\":{\"theta_deg\":%.4f,\"rho\":%.3f}", le->peak_theta_deg, rho);
    } else {
        printf(",\"hough\":null");
    }
    if (res.has_tilt)
        printf(",\"tilt_deg\":%.4f,\"level_source\":\"%s\"", res.tilt_deg,
               res.level_source == COACH_LEVEL_HORIZON ? "horizon" : "verticals");
    else
        printf(",\"tilt_deg\":null,\"level_source\":null");
    if (res.has_horizon)
        printf(",\"horizon_y\":%.5f", res.horizon_y);
    else
        printf(",\"horizon_y\":null");
    if (res.has_subject)
        printf(",\"subject\":{\"x\":%.5f,\"y\":%.5f,\"w\":%.5f,\"h\":%.5f}", res.subject.x,
               res.subject.y, res.subject.w, res.subject.h);
    else
        printf(",\"subject\":null");
    if (res.has_subject_focus)
        printf(",\"subject_focus\":%.5f", res.subject_focus);
    else
        printf(",\"subject_focus\":null");
    printf("}\n");
    rc = 0;
    if (sal_out) {
        const float *map = coach_compose_saliency(comp);
        if (!map || write_pgm16(sal_out, map, COACH_SAL_N, COACH_SAL_N, err, sizeof err)) {
            fprintf(stderr, "vfcoach inspect: %s\n", map ? err : "no saliency map");
            rc = 1;
        }
    }
out:
    coach_compose_destroy(comp);
    coach_tone_destroy(tone);
    cap_image_free(&f);
    return rc;
}

int app_inspect_main(int argc, char **argv)
{
    const char *sal = NULL;
    int i = 1;
    for (; i < argc && argv[i][0] == '-' && argv[i][1] == '-'; i++) {
        if (!strcmp(argv[i], "--")) {
            i++;
            break;
        }
        if (!strcmp(argv[i], "--saliency") && i + 1 < argc) {
            sal = argv[++i];
        } else {
            fprintf(stderr, "vfcoach inspect: unknown option or missing value: '%s' "
                            "(usage: vfcoach inspect [--saliency OUT.pgm] IMAGE...)\n", argv[i]);
            return 2;
        }
    }
    if (i >= argc) {
        fprintf(stderr, "vfcoach inspect: no image given (usage: vfcoach inspect [--saliency OUT.pgm] IMAGE...)\n");
        return 2;
    }
    if (sal && argc - i > 1) {
        fprintf(stderr, "vfcoach inspect: --saliency takes one image only\n");
        return 2;
    }
    int rc = 0;
    for (; i < argc; i++)
        rc |= inspect_one(argv[i], sal);
    fflush(stdout);
    return rc;
}
