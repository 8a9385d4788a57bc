#!/bin/sh
# Runs `holdfast check-config FILE` and checks its exit code and output.
# Usage: expect_check_config.sh HOLDFAST FILE EXPECTED_EXIT_CODE [TEXT...]
# Every TEXT must appear (as a fixed string) somewhere in the output.
holdfast=$1
file=$2
want_rc=$3
shift 3
out=$("$holdfast" check-config "$file" 2>&1)
rc=$?
status=0
if [ "$rc" -ne "$want_rc" ]; then
  echo "FAIL: exit code $rc, expected $want_rc"
  status=1
fi
for text in "$@"; do
  if ! printf '%s\n' "$out" | grep -qF -- "$text"; then
    echo "FAIL: output does not contain: $text"
    status=1
  fi
done
if [ "$status" -ne 0 ]; then
  echo "--- output of check-config $file ---"
  printf '%s\n' "$out"
fi
exit $status
