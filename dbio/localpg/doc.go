// Package localpg runs a throwaway PostgreSQL server for assort's tests and
// demo: a fresh cluster in a temporary directory, reachable only from this
// machine, tuned for speed rather than durability, and removed on Stop.
//
//	srv, err := localpg.Start(ctx, localpg.Options{})
//	if err != nil { ... }
//	defer srv.Stop(ctx)
//	conn, err := pgx.Connect(ctx, srv.URL("postgres"))
//
// Binaries. initdb and postgres are looked up on PATH first, then in
// /usr/lib/postgresql/<major>/bin (Debian's layout), newest major version
// first; both must sit in the same directory. pg_ctl is not needed: the
// postmaster runs in the foreground as a child of the calling process, so
// Stop can signal it and wait for it. When nothing is found the error
// (ErrNotInstalled) says how to install PostgreSQL.
//
// Layout. Under the server's directory (Dir): data/ is the cluster made by
// initdb, sock/ the private unix socket directory, server.log the output of
// initdb and the server's log. A socket directory whose path would be too
// long for a unix socket name is made under /tmp instead, and removed too.
//
// Access. The superuser is always named "postgres" (initdb -U postgres),
// whatever OS account runs the server. Authentication is "trust" for local
// connections only: the unix socket and host lines for 127.0.0.1/32 and
// ::1/128. The server listens on the unix socket and on one loopback TCP
// port, chosen by binding port 0 on 127.0.0.1 and closing it; if another
// process takes the port before the server binds it, Start retries with a
// new one. The cluster is UTF8 with the C locale (--no-locale) and TimeZone
// UTC.
//
// Settings. fsync, synchronous_commit and full_page_writes are off and
// wal_level is minimal: a crash loses the cluster, which is acceptable for
// a throwaway one and makes bulk loads much faster. Options.Settings adds or
// overrides settings; see DefaultSettings.
//
// Running as root. initdb and postgres refuse to run as root. When the
// caller's effective user id is 0, the directories are chowned to the
// "postgres" OS account and initdb and postgres are run as that account
// (SysProcAttr.Credential). Every parent of the directory must be
// searchable by that account (the default under /tmp is); Start checks
// this and says which directory is not. When no "postgres" account exists,
// Start fails and says so.
//
// Lifetime. Stop does a fast shutdown (SIGINT: running transactions are
// rolled back) and removes the directory unless Options.Keep is set. On
// Linux the postmaster is also started with a parent-death signal, so a
// server whose parent process dies (killed, or a test binary that times
// out) shuts itself down instead of lingering. The limitation: its
// directory is then left behind under the temporary directory, and on
// systems other than Linux the server keeps running until stopped by hand
// (kill -INT with the pid in data/postmaster.pid). Test binaries should
// stop the server from TestMain; package dbtest does that.
package localpg
