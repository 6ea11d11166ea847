/* coach_json(): one result as one JSON object, and the small stdio-free
 * text helpers the library uses (the coach library does no I/O, so it has
 * no snprintf).  Field names and units are a stable interface: add, never
 * rename.  Absent measurements (has_* == 0) are null; a NaN or infinity can
 * never reach the output because every number goes through coach_sb_num(). */
#include <math.h>
#include <stdint.h>
#include <string.h>

#include "coach/coach_internal.h"

void coach_sb_chr(coach_sbuf *b, char c)
{
    if (b->n > 0 && b->len + 1 < b->n) {
        b->p[b->len] = c;
        b->p[b->len + 1] = 0;
    }
    b->len++;
}

void coach_sb_str(coach_sbuf *b, const char *s)
{
    while (*s)
        coach_sb_chr(b, *s++);
}

void coach_sb_num(coach_sbuf *b, double v, int decimals)
{
    if (!isfinite(v)) {
        coach_sb_str(b, "null");
        return;
    }
    if (decimals < 0)
        decimals = 0;
    if (decimals > 9)
        decimals = 9;
    uint64_t p10 = 1;
    for (int i = 0; i < decimals; i++)
        p10 *= 10;
    double a = fabs(v);
    /* Beyond 1e15 no analysis value is meaningful; clamp to stay exact in
     * 64-bit integers. */
    if (a > 1e15)
        a = 1e15;
    uint64_t ip = (uint64_t)a;
    uint64_t fp = (uint64_t)llround((a - (double)ip) * (double)p10);
    if (fp >= p10) {
        ip++;
        fp -= p10;
    }
    while (decimals > 0 && fp % 10 == 0) {
        fp /= 10;
        decimals--;
    }
    if (v < 0 && (ip || fp))
        coach_sb_chr(b, '-');
    char tmp[24];
    int n = 0;
    do {
        tmp[n++] = (char)('0' + ip % 10);
        ip /= 10;
    } while (ip);
    while (n)
        coach_sb_chr(b, tmp[--n]);
    if (decimals > 0) {
        coach_sb_chr(b, '.');
        for (int i = decimals - 1; i >= 0; i--) {
            uint64_t d = fp;
            for (int k = 0; k < i; k++)
                d /= 10;
            coach_sb_chr(b, (char)('0' + d % 10));
        }
    }
}

/* Length of the valid UTF-8 sequence at s, 0 if invalid. */
static int utf8_len(const unsigned char *s)
{
    if (s[0] < 0x80)
        return 1;
    int n = (s[0] & 0xE0) == 0xC0 ? 2 : (s[0] & 0xF0) == 0xE0 ? 3 : (s[0] & 0xF8) == 0xF0 ? 4 : 0;
    if (n == 0 || (n == 2 && s[0] < 0xC2))
        return 0;
    for (int i = 1; i < n; i++)
        if ((s[i] & 0xC0) != 0x80)
            return 0;
    return n;
}

/* A JSON string: quotes, backslashes and control characters escaped;
 * bytes that are not UTF-8 (file names may be anything) become U+FFFD. */
static void sb_jstr(coach_sbuf *b, const char *str)
{
    static const char hex[] = "0123456789abcdef";
    const unsigned char *s = (const unsigned char *)str;
    coach_sb_chr(b, '"');
    while (*s) {
        if (*s == '"' || *s == '\\') {
            coach_sb_chr(b, '\\');
            coach_sb_chr(b, (char)*s++);
        } else if (*s < 0x20) {
            coach_sb_str(b, "\\u00");
            coach_sb_chr(b, hex[*s >> 4]);
            coach_sb_chr(b, hex[*s & 15]);
            s++;
        } else {
            int n = utf8_len(s);
            if (n == 0) {
                coach_sb_str(b, "\\ufffd");
                s++;
            } else {
                while (n--)
                    coach_sb_chr(b, (char)*s++);
            }
        }
    }
    coach_sb_chr(b, '"');
}

static void key(coach_sbuf *b, const char *k)
{
    sb_jstr(b, k);
    coach_sb_chr(b, ':');
}

/* Every member after the first is written as ",\"key\":value". */
static void kv_num(coach_sbuf *b, const char *k, double v, int dec)
{
    coach_sb_chr(b, ',');
    key(b, k);
    coach_sb_num(b, v, dec);
}

static void kv_opt(coach_sbuf *b, const char *k, int has, double v, int dec)
{
    coach_sb_chr(b, ',');
    key(b, k);
    if (has)
        coach_sb_num(b, v, dec);
    else
        coach_sb_str(b, "null");
}

static const char *const point_names[4] = { "upper-left", "upper-right", "lower-left",
                                            "lower-right" };

int coach_json(const coach_result *r, const char *file, char *buf, size_t n)
{
    coach_sbuf b = { buf, n, 0 };
    if (n > 0)
        buf[0] = 0;
    coach_sb_chr(&b, '{');
    if (file) {
        key(&b, "file");
        sb_jstr(&b, file);
        coach_sb_chr(&b, ',');
    }
    key(&b, "width");
    coach_sb_num(&b, r->width, 0);
    kv_num(&b, "height", r->height, 0);
    kv_num(&b, "exposure_ev", r->exposure_ev, 3);
    kv_num(&b, "clip_high", r->clip_high, 6);
    kv_num(&b, "clip_low", r->clip_low, 6);
    kv_num(&b, "colourfulness", r->colourfulness, 3);
    coach_sb_chr(&b, ',');
    key(&b, "colourfulness_word");
    sb_jstr(&b, coach_colourfulness_word(r->colourfulness));
    kv_num(&b, "sharpness", r->sharpness, 3);
    kv_num(&b, "score", r->score, 2);
    kv_num(&b, "score_raw", r->score_raw, 2);
    coach_sb_str(&b, r->ready ? ",\"ready\":true" : ",\"ready\":false");

    kv_opt(&b, "tilt_deg", r->has_tilt, r->tilt_deg, 3);
    coach_sb_chr(&b, ',');
    key(&b, "level_source");
    if (r->has_tilt && r->level_source == COACH_LEVEL_HORIZON)
        sb_jstr(&b, "horizon");
    else if (r->has_tilt && r->level_source == COACH_LEVEL_VERTICALS)
        sb_jstr(&b, "verticals");
    else
        coach_sb_str(&b, "null");
    kv_opt(&b, "tilt_confidence", r->has_tilt, r->tilt_confidence, 3);
    kv_opt(&b, "horizon_y", r->has_horizon, r->horizon_y, 4);

    coach_sb_chr(&b, ',');
    key(&b, "subject");
    if (r->has_subject) {
        coach_sb_chr(&b, '{');
        key(&b, "x");
        coach_sb_num(&b, r->subject.x, 4);
        kv_num(&b, "y", r->subject.y, 4);
        kv_num(&b, "w", r->subject.w, 4);
        kv_num(&b, "h", r->subject.h, 4);
        coach_sb_str(&b, "},");
        key(&b, "placement");
        coach_sb_chr(&b, '{');
        key(&b, "distance");
        coach_sb_num(&b, r->placement, 4);
        coach_sb_chr(&b, ',');
        key(&b, "point");
        sb_jstr(&b, point_names[r->placement_point & 3]);
        coach_sb_chr(&b, '}');
    } else {
        coach_sb_str(&b, "null,\"placement\":null");
    }
    coach_sb_chr(&b, ',');
    key(&b, "balance");
    coach_sb_chr(&b, '{');
    key(&b, "lr");
    coach_sb_num(&b, r->balance_lr, 3);
    kv_num(&b, "tb", r->balance_tb, 3);
    coach_sb_chr(&b, '}');

    coach_sb_chr(&b, ',');
    key(&b, "edge_intrusions");
    coach_sb_chr(&b, '[');
    static const struct { unsigned bit; const char *name; } sides[] = {
        { COACH_EDGE_LEFT, "left" }, { COACH_EDGE_RIGHT, "right" },
        { COACH_EDGE_TOP, "top" }, { COACH_EDGE_BOTTOM, "bottom" },
    };
    int first = 1;
    for (size_t i = 0; i < 4; i++)
        if (r->edge_intrusions & sides[i].bit) {
            if (!first)
                coach_sb_chr(&b, ',');
            sb_jstr(&b, sides[i].name);
            first = 0;
        }
    coach_sb_chr(&b, ']');
    kv_opt(&b, "lead_room", r->has_lead_room, r->lead_room, 3);
    kv_opt(&b, "motion_px_s", r->has_motion, r->motion_px_s, 1);
    kv_opt(&b, "subject_focus", r->has_subject_focus, r->subject_focus, 3);

    coach_sb_chr(&b, ',');
    key(&b, "terms");
    coach_sb_chr(&b, '{');
    for (int i = 0; i < r->nterms && i < COACH_MAX_TERMS; i++) {
        if (i)
            coach_sb_chr(&b, ',');
        key(&b, r->terms[i].name ? r->terms[i].name : "?");
        coach_sb_chr(&b, '{');
        key(&b, "value");
        coach_sb_num(&b, r->terms[i].value, 3);
        kv_num(&b, "weight", r->terms[i].weight, 3);
        kv_num(&b, "contribution", r->terms[i].contribution, 2);
        coach_sb_chr(&b, '}');
    }
    coach_sb_chr(&b, '}');

    coach_sb_chr(&b, ',');
    key(&b, "hints");
    coach_sb_chr(&b, '[');
    for (int i = 0; i < r->nhints && i < COACH_MAX_HINTS; i++) {
        if (i)
            coach_sb_chr(&b, ',');
        char h[COACH_HINT_LEN + 1];
        memcpy(h, r->hints[i], COACH_HINT_LEN);
        h[COACH_HINT_LEN] = 0;
        sb_jstr(&b, h);
    }
    coach_sb_str(&b, "]}");
    return b.len > (size_t)INT32_MAX ? INT32_MAX : (int)b.len;
}
