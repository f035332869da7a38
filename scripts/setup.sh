#!/usr/bin/env bash
# scripts/setup.sh: prepare a Debian machine to build and test assort from
# a fresh clone: Go on PATH (/usr/local/go/bin is added), the tools the
# Makefile uses (make, git) and ca-certificates (for the Go module proxy),
# then the Go modules. PostgreSQL's server is scripts/require-postgres.sh's
# job (`make setup`).
#
# Missing Debian packages are installed with apt-get when run as root;
# otherwise the script prints the command to run and exits 1. Go itself is
# not installed: Debian's golang package is older than go.mod's version.
# Quiet when everything is present; running it again is harmless.
set -euo pipefail
cd "$(dirname "$0")/.."

case ":$PATH:" in
*:/usr/local/go/bin:*) ;;
*) export PATH="/usr/local/go/bin:$PATH" ;;
esac

if ! command -v go >/dev/null 2>&1; then
	echo "setup: Go is not installed; unpack the release named in go.mod from https://go.dev/dl/ into /usr/local/go" >&2
	exit 1
fi

missing=()
command -v make >/dev/null 2>&1 || missing+=(make)
command -v git >/dev/null 2>&1 || missing+=(git)
[ -f /etc/ssl/certs/ca-certificates.crt ] || missing+=(ca-certificates)

if [ "${#missing[@]}" -gt 0 ]; then
	if [ "$(id -u)" -ne 0 ]; then
		echo "setup: missing ${missing[*]}; install with:" >&2
		echo "    sudo apt-get install -y ${missing[*]}" >&2
		exit 1
	fi
	if ! command -v apt-get >/dev/null 2>&1; then
		echo "setup: missing ${missing[*]} and apt-get is not available; install them with this system's package manager" >&2
		exit 1
	fi
	echo "setup: installing ${missing[*]}"
	apt-get update
	DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends "${missing[@]}"
fi

go mod download
