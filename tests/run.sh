#!/usr/bin/env bash
# Runs the whole FedGrid test suite on a fresh Debian 12 machine with the .NET SDK.
# Installs the outside reference tools the tests compare against (SciPy, CVXOPT, Chromium) when they
# are missing; safe to rerun. Exit code is non-zero when any test fails.
set -euo pipefail
cd "$(dirname "$0")/.."

need=()
/usr/bin/python3 -c "import scipy" 2>/dev/null || need+=(python3-scipy)
/usr/bin/python3 -c "import cvxopt" 2>/dev/null || need+=(python3-cvxopt)
[ -x /usr/bin/readelf ] || need+=(binutils)   # outside ELF reader for the TorchSharp build-fix tests
[ -x /usr/bin/chromium ] || need+=(chromium)  # headless rendering check of the offline exposure report
{ [ -x /usr/sbin/ip ] || [ -x /sbin/ip ] || [ -x /usr/bin/ip ]; } || need+=(iproute2)  # network-namespace test of the hosts (runs as root)
if [ ${#need[@]} -gt 0 ]; then
  sudo_cmd=""
  [ "$(id -u)" -ne 0 ] && sudo_cmd="sudo"
  echo "tests/run.sh: installing ${need[*]} (Debian packages) for the outside checks"
  $sudo_cmd apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $sudo_cmd apt-get install -y -qq "${need[@]}"
fi

log=$(mktemp)
trap 'rm -f "$log"' EXIT
set +e
# A test still running after 15 minutes (the slowest take about a minute) is reported by name and its test host ended,
# so a hang fails the run with the culprit named instead of running into the CI time limit.
dotnet test FedGrid.sln -c Release --blame-hang-timeout 15m --blame-hang-dump-type none 2>&1 | tee "$log"
status=${PIPESTATUS[0]}
set -e

# One closing line over all test assemblies: "N passed, N failed, N skipped".
awk '
  /(Passed|Failed)! *-/ {
    for (i = 1; i <= NF; i++) {
      if ($i == "Failed:")  f += $(i+1)
      if ($i == "Passed:")  p += $(i+1)
      if ($i == "Skipped:") s += $(i+1)
    }
  }
  END { gsub(",", "", p); printf "%d passed, %d failed, %d skipped\n", p, f, s }
' "$log"
exit "$status"
