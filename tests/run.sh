#!/usr/bin/env bash
# The one test command (README, .ci/run). Installs the Debian packages the tests need when run as root
# on a machine that lacks them, restores NuGet packages, runs every test, and ends with one summary line.
# Opt-in long runs: STACKBUILD_SOAK=1 bash tests/run.sh
set -euo pipefail
cd "$(dirname "$0")/.."

debs=(python3-nibabel python3-scipy python3-skimage python3-zarr libfftw3-single3 mricron-data nifti-bin fonts-dejavu-core chromium elastix)
missing=()
for p in "${debs[@]}"; do dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "ok installed" || missing+=("$p"); done
if ((${#missing[@]})); then
  if [ "$(id -u)" = 0 ]; then
    echo "Installing Debian packages for the tests: ${missing[*]}"
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq
    apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
  else
    echo "Missing Debian packages (run as root or install them): ${missing[*]}" >&2
  fi
fi

log=$(mktemp)
set +e
dotnet test StackBuild.sln -c Release --logger "console;verbosity=normal" 2>&1 | tee "$log"
status=${PIPESTATUS[0]}
set -e
# Repeat dotnet test's summary in the plain form "N passed, N failed, N skipped". Its console logger prints
# either "Failed: a, Passed: b, Skipped: c" on one line or "Passed: b" / "Failed: a" / "Skipped: c" lines.
count() { grep -Eo "^\s*$1: +[0-9]+" "$log" | tail -n 1 | grep -Eo "[0-9]+" || true; }
line=$(grep -Eo "Failed: +[0-9]+, Passed: +[0-9]+, Skipped: +[0-9]+" "$log" | tail -n 1 || true)
if [ -n "$line" ]; then
  failed=$(sed -E 's/Failed: +([0-9]+).*/\1/' <<<"$line")
  passed=$(sed -E 's/.*Passed: +([0-9]+).*/\1/' <<<"$line")
  skipped=$(sed -E 's/.*Skipped: +([0-9]+).*/\1/' <<<"$line")
else
  passed=$(count Passed); failed=$(count Failed); skipped=$(count Skipped)
fi
if [ -n "${passed:-}" ] || [ -n "${failed:-}" ]; then
  echo "${passed:-0} passed, ${failed:-0} failed, ${skipped:-0} skipped"
fi
rm -f "$log"
exit "$status"
