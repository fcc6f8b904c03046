#!/usr/bin/env bash
# usage: scripts/pip_retry.sh PYTHON -m pip install ...
# Runs a pip command again (up to PIP_ATTEMPTS times, 4 by default, 15 s apart) when it fails, so a
# download cut off by the network does not fail the setup; pip itself resumes and retries within one
# attempt too (PIP_RESUME_RETRIES, PIP_RETRIES, PIP_TIMEOUT below, unless set already). A failure that
# is not the network's (a bad requirement) fails the same way each time and is reported at the end.
set -uo pipefail
export PIP_RESUME_RETRIES="${PIP_RESUME_RETRIES:-10}"
export PIP_RETRIES="${PIP_RETRIES:-10}"
export PIP_TIMEOUT="${PIP_TIMEOUT:-60}"
attempts="${PIP_ATTEMPTS:-4}"
for ((i = 1; i <= attempts; i++)); do
	"$@" && exit 0
	status=$?
	if ((i < attempts)); then
		echo "pip_retry.sh: attempt $i of $attempts failed (exit $status); trying again in 15 s: $*" >&2
		sleep 15
	fi
done
echo "pip_retry.sh: all $attempts attempts failed (last exit $status): $*" >&2
exit "$status"
