#!/usr/bin/env bash
# scripts/bench.sh: what `make bench` runs. Measures assort's speed as
# ratios to PostgreSQL's own in one run (see cmd/assort-bench/main.go):
# builds assort, the benchmark program and package fit's test binary into
# a scratch directory, then runs the benchmark against a throwaway
# PostgreSQL, printing a table on stdout and writing the same as JSON.
#
# Environment:
#   BENCH_ROWS  rows of the large table (default 1e7); 1e6 skips the
#               large part for a quick run (about 5 minutes instead of 15)
#   BENCH_JSON  where the JSON goes (default .bench/bench.json)
#   BENCH_ARGS  more flags for assort-bench (--rounds 5, --memory 256MiB...)
#
# Needs PostgreSQL's server binaries and psql (scripts/require-postgres.sh
# installs them as root) and GNU time for peak memory: installed here from
# Debian's `time` package when missing and root; otherwise the peak comes
# from the kernel's wait4 resource usage, the same figure, and the report
# says so. Everything the run makes (binaries, the server's cluster, spill
# files, scratch files) lives in one scratch directory, removed at the end,
# also on error or interrupt.
set -euo pipefail
cd "$(dirname "$0")/.."

case ":$PATH:" in
*:/usr/local/go/bin:*) ;;
*) export PATH="$PATH:/usr/local/go/bin" ;;
esac

bash scripts/require-postgres.sh

if [ ! -x /usr/bin/time ]; then
	if [ "$(id -u)" -eq 0 ] && command -v apt-get >/dev/null 2>&1; then
		echo "bench: installing Debian's time package (GNU time, for peak memory)"
		DEBIAN_FRONTEND=noninteractive apt-get install -y time >/dev/null ||
			{ apt-get update >/dev/null && DEBIAN_FRONTEND=noninteractive apt-get install -y time >/dev/null; } ||
			echo "bench: could not install time; peak memory will come from wait4 instead" >&2
	else
		echo "bench: /usr/bin/time is missing (sudo apt-get install -y time); peak memory will come from wait4 instead" >&2
	fi
fi

# The scratch directory must be searchable by the postgres OS account,
# which runs the throwaway server when we are root.
work=$(mktemp -d "${TMPDIR:-/tmp}/assort-bench.XXXXXX")
chmod 755 "$work"
cleanup() { rm -rf "$work"; }
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

echo "bench: building into $work"
go build -o "$work/assort" ./cmd/assort
go build -o "$work/assort-bench" ./cmd/assort-bench
fit_test=""
if go test -c -o "$work/fit.test" ./fit/; then
	fit_test="$work/fit.test"
else
	echo "bench: package fit's tests do not build; its benchmarks are reported as not measured" >&2
fi

out="${BENCH_JSON:-.bench/bench.json}"
echo "bench: load average before the run: $(cut -d' ' -f1-3 /proc/loadavg 2>/dev/null || echo unknown)"
# TMPDIR points the server's cluster, assort's spill files and the
# program's scratch files into $work. BENCH_ARGS is split on spaces.
# shellcheck disable=SC2086
TMPDIR="$work" "$work/assort-bench" \
	--assort "$work/assort" \
	--fit-test "$fit_test" \
	--rows "${BENCH_ROWS:-1e7}" \
	--json "$out" \
	${BENCH_ARGS:-}
