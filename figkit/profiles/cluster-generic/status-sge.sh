#!/bin/sh
# Status of one Grid Engine job for Snakemake's generic cluster executor: prints running,
# success or failed.  Replace with your batch system's equivalent.
id="$1"
if qstat -j "$id" >/dev/null 2>&1; then echo running; exit 0; fi
code=$(qacct -j "$id" 2>/dev/null | awk '$1 == "exit_status" {print $2}')
if [ "$code" = "0" ]; then echo success; elif [ -z "$code" ]; then echo running; else echo failed; fi
