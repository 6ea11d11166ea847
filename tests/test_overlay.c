/* cmocka tests for overlay/.  Several people add tests here at once: add with
 * small insertions (never rewrite the file), each test next to its section's
 * other tests and in the matching section of main()'s list. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include "overlay/overlay.h"

/* ==== section A ==== */

/* ==== section B ==== */

int main(void)
{
    const struct CMUnitTest tests[] = {
        /* ---- section A ---- */
        /* ---- section B ---- */
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
