#!/bin/bash
# The udev rule that `make install` installs: every rule line parses into
# KEY[{attr}] OP "value" pairs with keys and operators from udev(7), modes
# never give "other" users access, the seat user gets the uaccess tag, and
# USB cameras are kept out of runtime autosuspend (power/control = on, the
# kernel's Documentation/driver-api/usb/power-management.rst).
set -u
RULE=$(dirname "$0")/../udev/70-vfcoach-camera.rules
[ -f "$RULE" ] || { echo "FAIL: $RULE missing"; exit 1; }
fail=0
keys='ACTION|DEVPATH|KERNEL|KERNELS|NAME|SYMLINK|SUBSYSTEM|SUBSYSTEMS|DRIVER|DRIVERS|ATTR|ATTRS|SYSCTL|ENV|CONST|TAG|TAGS|TEST|PROGRAM|RESULT|OWNER|GROUP|MODE|SECLABEL|RUN|LABEL|GOTO|IMPORT|OPTIONS'
n=0
while IFS= read -r line; do
    case "$line" in ''|'#'*) continue ;; esac
    n=$((n + 1))
    rest=$line
    while [ -n "$rest" ]; do
        if [[ $rest =~ ^($keys)(\{[^}]+\})?(==|!=|\+=|-=|:=|=)\"([^\"]*)\"(,[[:space:]]*)?(.*)$ ]]; then
            key=${BASH_REMATCH[1]} op=${BASH_REMATCH[3]} val=${BASH_REMATCH[4]} rest=${BASH_REMATCH[6]}
            if [ "$key" = MODE ] && [ "${val: -1}" != 0 ]; then
                echo "FAIL: MODE=\"$val\" lets other users at the camera"; fail=1
            fi
            [ "$key" = LABEL ] || [ "$key" = GOTO ] || [ "$key" = RUN ] || [ "$key" = TAG ] || [ "$key" = OWNER ] ||
                [ "$key" = GROUP ] || [ "$key" = MODE ] || [[ $op == == || $op == != ]] ||
                { echo "FAIL: '$key$op' assigns where a match was meant: $line"; fail=1; }
        else
            echo "FAIL: cannot parse '$rest' in: $line"; fail=1; break
        fi
    done
done < "$RULE"
grep -q 'SUBSYSTEM=="video4linux".*TAG+="uaccess"' "$RULE" || { echo "FAIL: no uaccess tag on video4linux"; fail=1; }
grep -q 'MODE="0660"' "$RULE" || { echo "FAIL: capture nodes are not 0660"; fail=1; }
grep -q 'echo on > /sys%p/../power/control' "$RULE" || { echo "FAIL: USB autosuspend not turned off"; fail=1; }
goto=$(sed -n 's/.*GOTO="\([^"]*\)".*/\1/p' "$RULE")
[ -z "$goto" ] || grep -q "LABEL=\"$goto\"" "$RULE" || { echo "FAIL: GOTO $goto has no LABEL"; fail=1; }
[ $fail = 0 ] && echo "check_udev_rule: $n rule lines parse; 0660, uaccess, autosuspend off"
exit $fail
