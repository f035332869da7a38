#!/usr/bin/env bash
# scripts/require-postgres.sh: make sure PostgreSQL's server binaries
# (initdb and postgres, in one directory) are installed, as assort's
# throwaway test and demo server (package dbio/localpg) needs them.
#
# They are looked for where dbio/localpg looks: on PATH, then in
# /usr/lib/postgresql/<major>/bin. When found, the script says nothing and
# exits 0. When missing: as root it installs Debian's postgresql package
# with apt-get and stops the cluster that the package starts (assort never
# uses it); otherwise it prints the command to run and exits 1.
# Running it again is harmless.
set -euo pipefail

# find_bindir prints the first directory holding executable initdb and
# postgres, or fails.
find_bindir() {
	local dir
	local IFS=:
	for dir in $PATH; do
		if [ -x "${dir:-.}/initdb" ] && [ -x "${dir:-.}/postgres" ]; then
			printf '%s\n' "${dir:-.}"
			return 0
		fi
	done
	unset IFS
	if [ -d /usr/lib/postgresql ]; then
		for dir in $(ls -1 /usr/lib/postgresql 2>/dev/null | sort -V -r); do
			if [ -x "/usr/lib/postgresql/$dir/bin/initdb" ] && [ -x "/usr/lib/postgresql/$dir/bin/postgres" ]; then
				printf '%s\n' "/usr/lib/postgresql/$dir/bin"
				return 0
			fi
		done
	fi
	return 1
}

# require_account fails, with a hint, when root has no postgres OS account
# to run the server as (initdb and postgres refuse to run as root).
require_account() {
	if [ "$(id -u)" -eq 0 ] && ! id -u postgres >/dev/null 2>&1; then
		echo "require-postgres: running as root, but there is no 'postgres' OS account to run the test server as." >&2
		echo "require-postgres: create one: useradd --system --home-dir /var/lib/postgresql postgres" >&2
		return 1
	fi
}

if find_bindir >/dev/null; then
	require_account
	exit 0
fi

if [ "$(id -u)" -ne 0 ]; then
	echo "require-postgres: PostgreSQL's server (initdb, postgres) is not installed (looked on PATH and in /usr/lib/postgresql/*/bin)." >&2
	echo "require-postgres: install it with:" >&2
	echo "    sudo apt-get install -y postgresql" >&2
	exit 1
fi

if ! command -v apt-get >/dev/null 2>&1; then
	echo "require-postgres: PostgreSQL's server is not installed and apt-get is not available; install PostgreSQL's server binaries (initdb, postgres) with this system's package manager." >&2
	exit 1
fi

echo "require-postgres: installing Debian's postgresql package"
apt-get update
DEBIAN_FRONTEND=noninteractive apt-get install -y postgresql

# The package creates and may start a cluster of its own; assort's tests and
# demo never use it, so stop it rather than leave it running.
if command -v pg_lsclusters >/dev/null 2>&1; then
	pg_lsclusters -h | while read -r ver name _port status _rest; do
		if [ "$status" = online ]; then
			echo "require-postgres: stopping Debian's cluster $ver/$name (not used by assort)"
			pg_ctlcluster "$ver" "$name" stop || echo "require-postgres: could not stop cluster $ver/$name; it is harmless but uses memory" >&2
		fi
	done
fi

if ! bindir=$(find_bindir); then
	echo "require-postgres: installed the postgresql package, but initdb and postgres are still not found" >&2
	exit 1
fi
require_account
echo "require-postgres: PostgreSQL server binaries in $bindir"
