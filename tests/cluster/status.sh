#!/bin/sh
# Status of a job of tests/cluster/submit.sh: running until its exit code is written.
rc_file=".queue/$1.rc"
if [ ! -f "$rc_file" ]; then echo running; elif [ "$(cat "$rc_file")" = "0" ]; then echo success; else echo failed; fi
