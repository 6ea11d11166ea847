/* Small helpers shared by the program's files (main.c and the subcommands).
 * Kept out of main.c so the test binaries, which link every app_*.c but not
 * main.c, can use them too. */
#include <errno.h>
#include <stdlib.h>

#include "coach/app.h"

/* "WxH" with both sides within what the analyzer takes; 0 or -EINVAL.
 * Used by the options and by `vfcoach bench --size`. */
int app_parse_size(const char *s, int *w, int *h)
{
    char *end;
    long a = strtol(s, &end, 10);
    if (end == s || (*end != 'x' && *end != 'X'))
        return -EINVAL;
    const char *p = end + 1;
    long b = strtol(p, &end, 10);
    if (end == p || *end || a < COACH_MIN_DIM || b < COACH_MIN_DIM || a > COACH_MAX_DIM ||
        b > COACH_MAX_DIM)
        return -EINVAL;
    *w = (int)a;
    *h = (int)b;
    return 0;
}
