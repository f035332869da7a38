package localpg

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"net"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// tempName returns a fresh path under os.TempDir(), which (unlike
// t.TempDir's 0700 parents) the "postgres" account can reach when the
// tests run as root. The caller removes it.
func tempName(t *testing.T, prefix string) string {
	t.Helper()
	b := make([]byte, 6)
	if _, err := rand.Read(b); err != nil {
		t.Fatal(err)
	}
	return filepath.Join(os.TempDir(), prefix+hex.EncodeToString(b))
}

func startServer(t *testing.T, opt Options) *Server {
	t.Helper()
	srv, err := Start(t.Context(), opt)
	if err != nil {
		t.Fatalf("Start: %v", err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		if err := srv.Stop(ctx); err != nil {
			t.Errorf("Stop: %v", err)
		}
	})
	return srv
}

func connect(t *testing.T, url string) *pgx.Conn {
	t.Helper()
	conn, err := pgx.Connect(t.Context(), url)
	if err != nil {
		t.Fatalf("connect %s: %v", url, err)
	}
	t.Cleanup(func() {
		if err := conn.Close(context.Background()); err != nil {
			t.Errorf("close: %v", err)
		}
	})
	return conn
}

func TestStartConnectStop(t *testing.T) {
	ctx := t.Context()
	srv, err := Start(ctx, Options{})
	if err != nil {
		t.Fatalf("Start: %v", err)
	}
	dir := srv.Dir()

	conn, err := pgx.Connect(ctx, srv.URL("postgres"))
	if err != nil {
		t.Fatalf("connect over TCP: %v", err)
	}
	var version string
	if err := conn.QueryRow(ctx, "SELECT version()").Scan(&version); err != nil {
		t.Fatalf("SELECT version(): %v", err)
	}
	if !strings.HasPrefix(version, "PostgreSQL ") {
		t.Errorf("version() = %q, want it to start with %q", version, "PostgreSQL ")
	}

	// The settings the package documentation promises, as the server
	// reports them (SHOW's spelling of each value is PostgreSQL's own).
	want := []struct{ name, value string }{
		{"fsync", "off"},
		{"synchronous_commit", "off"},
		{"full_page_writes", "off"},
		{"wal_level", "minimal"},
		{"max_wal_senders", "0"},
		{"shared_buffers", "256MB"},
		{"max_connections", "100"},
		{"server_encoding", "UTF8"},
		{"lc_collate", "C"},
		{"lc_ctype", "C"},
		{"TimeZone", "UTC"},
		{"listen_addresses", "127.0.0.1"},
		{"unix_socket_directories", srv.SocketDir()},
	}
	for _, w := range want {
		var got string
		if err := conn.QueryRow(ctx, "SELECT current_setting($1)", w.name).Scan(&got); err != nil {
			t.Fatalf("current_setting(%s): %v", w.name, err)
		}
		if got != w.value {
			t.Errorf("setting %s = %q, want %q", w.name, got, w.value)
		}
	}
	var user string
	if err := conn.QueryRow(ctx, "SELECT current_user").Scan(&user); err != nil {
		t.Fatal(err)
	}
	if user != Superuser {
		t.Errorf("current_user = %q, want %q", user, Superuser)
	}
	var isSuper bool
	if err := conn.QueryRow(ctx, "SELECT rolsuper FROM pg_roles WHERE rolname = current_user").Scan(&isSuper); err != nil {
		t.Fatal(err)
	}
	if !isSuper {
		t.Errorf("role %q is not a superuser", user)
	}
	if err := conn.Close(ctx); err != nil {
		t.Fatalf("close: %v", err)
	}

	// The unix socket works too.
	sock, err := pgx.Connect(ctx, "host="+srv.SocketDir()+" port="+strconv.Itoa(srv.Port())+" user=postgres dbname=postgres")
	if err != nil {
		t.Fatalf("connect over unix socket: %v", err)
	}
	var one int
	if err := sock.QueryRow(ctx, "SELECT 1").Scan(&one); err != nil || one != 1 {
		t.Errorf("SELECT 1 over unix socket = %d, %v", one, err)
	}
	if err := sock.Close(ctx); err != nil {
		t.Fatalf("close: %v", err)
	}

	pid := srv.PID()
	if err := srv.Stop(ctx); err != nil {
		t.Fatalf("Stop: %v", err)
	}
	if _, err := os.Stat(dir); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("after Stop, stat %s: %v, want not exist", dir, err)
	}
	if alive(pid) {
		t.Errorf("after Stop, postmaster %d still running", pid)
	}
	if err := srv.Stop(ctx); err != nil {
		t.Errorf("second Stop: %v, want nil", err)
	}
	if _, err := pgx.Connect(ctx, srv.URL("postgres")); err == nil {
		t.Errorf("connect after Stop succeeded")
	}
}

// TestServerAccount checks the OS account the postmaster runs as: the
// caller's own, or the "postgres" account when the caller is root, since
// initdb and postgres refuse to run as root.
func TestServerAccount(t *testing.T) {
	srv := startServer(t, Options{})
	want := uint32(os.Geteuid())
	if os.Geteuid() == 0 {
		acct, err := accountFor(0)
		if err != nil {
			t.Fatalf("account for root: %v", err)
		}
		want = acct.uid
		if want == 0 {
			t.Fatalf("account %q has uid 0", acct.name)
		}
	}
	uid, err := processUID(srv.PID())
	if err != nil {
		t.Fatal(err)
	}
	if uid != want {
		t.Errorf("postmaster runs as uid %d, want %d", uid, want)
	}
	fi, err := os.Stat(filepath.Join(srv.Dir(), "data", "PG_VERSION"))
	if err != nil {
		t.Fatalf("cluster not in data/: %v", err)
	}
	if got := fileUID(fi); got != want {
		t.Errorf("data/PG_VERSION owned by uid %d, want %d", got, want)
	}
}

func TestCreateDatabase(t *testing.T) {
	srv := startServer(t, Options{})
	ctx := t.Context()
	// A name that needs quoting.
	const name = "assort Demo"
	if err := srv.CreateDatabase(ctx, name); err != nil {
		t.Fatalf("CreateDatabase: %v", err)
	}
	conn := connect(t, srv.URL(name))
	var got string
	if err := conn.QueryRow(ctx, "SELECT current_database()").Scan(&got); err != nil {
		t.Fatal(err)
	}
	if got != name {
		t.Errorf("current_database() = %q, want %q", got, name)
	}
	if err := srv.CreateDatabase(ctx, name); err == nil {
		t.Errorf("second CreateDatabase(%q) succeeded, want an error", name)
	}
}

func TestKeep(t *testing.T) {
	dir := tempName(t, "assort-pg-keep-")
	t.Cleanup(func() {
		if err := os.RemoveAll(dir); err != nil {
			t.Error(err)
		}
	})
	srv, err := Start(t.Context(), Options{Dir: dir, Keep: true})
	if err != nil {
		t.Fatalf("Start: %v", err)
	}
	if srv.Dir() != dir {
		t.Errorf("Dir() = %q, want %q", srv.Dir(), dir)
	}
	if err := srv.Stop(t.Context()); err != nil {
		t.Fatalf("Stop: %v", err)
	}
	log, err := os.ReadFile(srv.LogPath())
	if err != nil {
		t.Fatalf("log not kept: %v", err)
	}
	// The last line PostgreSQL logs after a clean shutdown.
	if !strings.Contains(string(log), "database system is shut down") {
		t.Errorf("log %s lacks the shutdown line; it ends:\n%s", srv.LogPath(), logTail(srv.LogPath(), 2048))
	}
	if _, err := os.Stat(filepath.Join(dir, "data", "PG_VERSION")); err != nil {
		t.Errorf("cluster not kept: %v", err)
	}
}

func TestSettingsOverride(t *testing.T) {
	srv := startServer(t, Options{Settings: map[string]string{"work_mem": "7MB", "shared_buffers": "32MB"}})
	conn := connect(t, srv.URL(""))
	for name, want := range map[string]string{"work_mem": "7MB", "shared_buffers": "32MB", "fsync": "off"} {
		var got string
		if err := conn.QueryRow(t.Context(), "SELECT current_setting($1)", name).Scan(&got); err != nil {
			t.Fatal(err)
		}
		if got != want {
			t.Errorf("setting %s = %q, want %q", name, got, want)
		}
	}
}

func TestStartErrors(t *testing.T) {
	full := tempName(t, "assort-pg-full-")
	if err := os.MkdirAll(full, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(full, "other"), []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	bad := tempName(t, "assort-pg-bad-")
	t.Cleanup(func() {
		if err := errors.Join(os.RemoveAll(full), os.RemoveAll(bad)); err != nil {
			t.Error(err)
		}
	})
	tests := []struct {
		name     string
		opt      Options
		is       error  // errors.Is target, if any
		contains string // text the error must hold
		gone     string // directory that must not exist afterwards
	}{
		{
			name:     "dir not empty",
			opt:      Options{Dir: full},
			contains: "is not empty",
		},
		{
			name:     "no binaries in BinDir",
			opt:      Options{BinDir: t.TempDir()},
			is:       ErrNotInstalled,
			contains: "apt-get install -y postgresql",
		},
		{
			// The server refuses the setting; the log tail in the
			// error shows why.
			name:     "bad setting",
			opt:      Options{Dir: bad, Settings: map[string]string{"shared_buffers": "lots"}},
			contains: `invalid value for parameter "shared_buffers"`,
			gone:     bad,
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			srv, err := Start(t.Context(), tc.opt)
			if err == nil {
				if serr := srv.Stop(t.Context()); serr != nil {
					t.Error(serr)
				}
				t.Fatalf("Start succeeded, want an error")
			}
			if tc.is != nil && !errors.Is(err, tc.is) {
				t.Errorf("error %v is not %v", err, tc.is)
			}
			if !strings.Contains(err.Error(), tc.contains) {
				t.Errorf("error %q does not contain %q", err, tc.contains)
			}
			if tc.gone != "" {
				if _, serr := os.Stat(tc.gone); !errors.Is(serr, os.ErrNotExist) {
					t.Errorf("after failed Start, stat %s: %v, want not exist", tc.gone, serr)
				}
			}
		})
	}
	if _, err := os.Stat(filepath.Join(full, "other")); err != nil {
		t.Errorf("Start touched a non-empty directory: %v", err)
	}
}

// TestLongDirSocket checks that a directory too deep for a unix socket
// name still gets a working socket, placed under /tmp.
func TestLongDirSocket(t *testing.T) {
	base := tempName(t, "assort-pg-long-")
	t.Cleanup(func() {
		if err := os.RemoveAll(base); err != nil {
			t.Error(err)
		}
	})
	dir := filepath.Join(base, strings.Repeat("d", 60), strings.Repeat("e", 60))
	if err := os.MkdirAll(filepath.Dir(dir), 0o755); err != nil {
		t.Fatal(err)
	}
	srv := startServer(t, Options{Dir: dir})
	if strings.HasPrefix(srv.SocketDir(), dir) {
		t.Errorf("socket dir %s is inside the long directory", srv.SocketDir())
	}
	if len(srv.SocketDir()) > maxSocketDir {
		t.Errorf("socket dir %s longer than %d", srv.SocketDir(), maxSocketDir)
	}
	conn := connect(t, "host="+srv.SocketDir()+" port="+strconv.Itoa(srv.Port())+" user=postgres dbname=postgres")
	var one int
	if err := conn.QueryRow(t.Context(), "SELECT 1").Scan(&one); err != nil || one != 1 {
		t.Errorf("SELECT 1 over unix socket = %d, %v", one, err)
	}
}

func TestURL(t *testing.T) {
	s := &Server{port: 54321}
	tests := []struct {
		name, db, want string
	}{
		{"default", "", "postgres://postgres@127.0.0.1:54321/postgres?sslmode=disable"},
		{"plain", "assort", "postgres://postgres@127.0.0.1:54321/assort?sslmode=disable"},
		{"space", "a b", "postgres://postgres@127.0.0.1:54321/a%20b?sslmode=disable"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := s.URL(tc.db); got != tc.want {
				t.Errorf("URL(%q) = %q, want %q", tc.db, got, tc.want)
			}
		})
	}
}

func TestLogTail(t *testing.T) {
	path := filepath.Join(t.TempDir(), "log")
	if err := os.WriteFile(path, []byte("first line\nsecond line\nthird\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name string
		max  int64
		want string
	}{
		{"whole file", 1000, "first line\nsecond line\nthird"},
		{"exact size", 29, "first line\nsecond line\nthird"},
		{"cut at last line start", 6, "third"},
		{"cut at second line start", 18, "second line\nthird"},
		{"cut mid-line", 12, "third"},
		{"cut one byte into a line", 17, "third"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := logTail(path, tc.max); got != tc.want {
				t.Errorf("logTail(%d) = %q, want %q", tc.max, got, tc.want)
			}
		})
	}
}

// BenchmarkStartStop measures what a test binary pays for its throwaway
// server: initdb, start-up, fast shutdown and removal.
func BenchmarkStartStop(b *testing.B) {
	ctx := b.Context()
	for b.Loop() {
		srv, err := Start(ctx, Options{})
		if err != nil {
			b.Fatal(err)
		}
		if err := srv.Stop(ctx); err != nil {
			b.Fatal(err)
		}
	}
}

// TestPortTaken checks that a postmaster whose port another process holds
// reports errPortTaken, on which Start retries, and that the same cluster
// then starts on a free port.
func TestPortTaken(t *testing.T) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer func() {
		if err := l.Close(); err != nil {
			t.Error(err)
		}
	}()
	taken := l.Addr().(*net.TCPAddr).Port

	s, err := create(t.Context(), Options{})
	if err != nil {
		t.Fatalf("create: %v", err)
	}
	t.Cleanup(func() {
		if err := s.Stop(context.Background()); err != nil {
			t.Errorf("Stop: %v", err)
		}
	})
	err = s.run(t.Context(), taken)
	if !errors.Is(err, errPortTaken) {
		t.Fatalf("run on taken port %d: %v, want errPortTaken", taken, err)
	}
	port, err := freePort()
	if err != nil {
		t.Fatal(err)
	}
	if err := s.run(t.Context(), port); err != nil {
		t.Fatalf("run on free port %d: %v", port, err)
	}
	conn := connect(t, s.URL(""))
	var got int
	if err := conn.QueryRow(t.Context(), "SELECT current_setting('port')::int").Scan(&got); err != nil {
		t.Fatal(err)
	}
	if got != port {
		t.Errorf("server port %d, want %d", got, port)
	}
}
