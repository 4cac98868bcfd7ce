#!/bin/sh
# A stand-in batch system for tests: starts Snakemake's job script in the background in a clean
# environment (env -i with only PATH and HOME, as on another node) and prints a job id.  State
# lives in .queue/ of the project (the working directory).  Each call is one submission; if
# .queue/kill-next exists, that submission fails at once with code 137 (killed) instead.
set -e
script="$1"
mkdir -p .queue
id="job$(date +%s%N)$$"
echo "$id" >> .queue/submitted
if [ -f .queue/kill-next ]; then   # a test's stand-in for a job the scheduler killed (memory)
    rm .queue/kill-next
    echo 137 > ".queue/$id.rc"
    echo "$id"
    exit 0
fi
# The job's exit code is written whatever it is: under set -e (inherited by the subshell) a failed
# job would end the subshell before its code was written, and the job would be "running" forever.
( rc=0; env -i PATH="$PATH" HOME="$HOME" sh "$script" > ".queue/$id.out" 2>&1 || rc=$?
  echo "$rc" > ".queue/$id.rc" ) < /dev/null > /dev/null 2>&1 &
echo "$id"
