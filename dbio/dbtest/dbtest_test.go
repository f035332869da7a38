package dbtest

import (
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"testing"
)

// childEnv, when set, names a file where the test binary, run as a child
// by TestMainStopsServer, writes the directory and pid of the server it
// started; its value's suffix ":fail" makes TestChild fail.
const childEnv = "ASSORT_DBTEST_CHILD_REPORT"

func TestMain(m *testing.M) {
	report := os.Getenv(childEnv)
	if report == "" {
		Main(m)
		return
	}
	code := run(m)
	path, _, _ := strings.Cut(report, ":")
	msg := "no server"
	if server != nil {
		msg = fmt.Sprintf("%s\n%d\n", server.Dir(), server.PID())
	}
	if err := os.WriteFile(path, []byte(msg), 0o644); err != nil {
		fmt.Fprintln(os.Stderr, err)
		code = 3
	}
	os.Exit(code)
}

// TestChild is the test run by the child test binaries of
// TestMainStopsServer: it starts the server by asking for a connection and
// fails when told to. In an ordinary run it only connects.
func TestChild(t *testing.T) {
	conn := Conn(t)
	if err := conn.Ping(t.Context()); err != nil {
		t.Fatal(err)
	}
	if strings.HasSuffix(os.Getenv(childEnv), ":fail") {
		t.Fatal("failing on purpose, as the parent test asked")
	}
}

// TestMainStopsServer runs this test binary as a child, once with a
// passing test and once with a failing one, and checks that each time
// Main stopped the server it started and removed its directory, and
// passed the tests' outcome on as the exit code.
func TestMainStopsServer(t *testing.T) {
	tests := []struct {
		name     string
		fail     bool
		wantCode int
	}{
		{"tests pass", false, 0},
		{"tests fail", true, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			report := filepath.Join(t.TempDir(), "report")
			val := report
			if tc.fail {
				val += ":fail"
			}
			cmd := exec.Command(os.Args[0], "-test.run=^TestChild$", "-test.count=1")
			for _, kv := range os.Environ() {
				// The child must start its own server.
				if !strings.HasPrefix(kv, EnvURL+"=") {
					cmd.Env = append(cmd.Env, kv)
				}
			}
			cmd.Env = append(cmd.Env, childEnv+"="+val)
			out, err := cmd.CombinedOutput()
			code := 0
			var exitErr *exec.ExitError
			if errors.As(err, &exitErr) {
				code = exitErr.ExitCode()
			} else if err != nil {
				t.Fatalf("run child: %v", err)
			}
			if code != tc.wantCode {
				t.Errorf("child exit code %d, want %d; output:\n%s", code, tc.wantCode, out)
			}
			b, err := os.ReadFile(report)
			if err != nil {
				t.Fatalf("child report: %v; output:\n%s", err, out)
			}
			lines := strings.Split(strings.TrimSpace(string(b)), "\n")
			if len(lines) != 2 {
				t.Fatalf("child report %q, want a directory and a pid", b)
			}
			if _, err := os.Stat(lines[0]); !errors.Is(err, os.ErrNotExist) {
				t.Errorf("server directory %s after the tests: %v, want not exist", lines[0], err)
			}
			pid, err := strconv.Atoi(lines[1])
			if err != nil {
				t.Fatal(err)
			}
			// The child waited for its postmaster, so the pid is gone.
			if err := syscall.Kill(pid, 0); !errors.Is(err, syscall.ESRCH) {
				t.Errorf("postmaster %d after the tests: kill 0 = %v, want ESRCH", pid, err)
			}
		})
	}
}

func TestURL(t *testing.T) {
	url := URL(t)
	if url == "" {
		t.Fatal("URL is empty")
	}
	if u := os.Getenv(EnvURL); u != "" {
		if url != u {
			t.Errorf("URL() = %q, want %s = %q", url, EnvURL, u)
		}
	} else if server == nil || url != server.URL("postgres") {
		t.Errorf("URL() = %q, want the local server's", url)
	}
	if again := URL(t); again != url {
		t.Errorf("second URL() = %q, want %q", again, url)
	}
}

func TestSchema(t *testing.T) {
	conn := Conn(t)
	ctx := t.Context()
	exists := func(t *testing.T, name string) bool {
		t.Helper()
		var n int
		if err := conn.QueryRow(ctx, "SELECT count(*) FROM pg_namespace WHERE nspname = $1", name).Scan(&n); err != nil {
			t.Fatal(err)
		}
		return n == 1
	}
	pattern := regexp.MustCompile(`^t_[0-9a-f]{16}$`)

	var names []string
	for i := range 2 {
		t.Run(fmt.Sprintf("use %d", i), func(t *testing.T) {
			url, schema := Schema(t)
			if !pattern.MatchString(schema) {
				t.Errorf("schema name %q does not match %s", schema, pattern)
			}
			if !exists(t, schema) {
				t.Fatalf("schema %s does not exist", schema)
			}
			names = append(names, schema)
			c := Conn(t)
			if url != URL(t) {
				t.Errorf("Schema's URL %q, want the base URL %q", url, URL(t))
			}
			// Names are qualified; the search path is the server's default.
			var path string
			if err := c.QueryRow(ctx, "SHOW search_path").Scan(&path); err != nil {
				t.Fatal(err)
			}
			if path != `"$user", public` {
				t.Errorf("search_path = %q, want PostgreSQL's default %q", path, `"$user", public`)
			}
			tbl := schema + ".obs"
			if _, err := c.Exec(ctx, "CREATE TABLE "+tbl+" (k bigint PRIMARY KEY, x float8)"); err != nil {
				t.Fatal(err)
			}
			if _, err := c.Exec(ctx, "INSERT INTO "+tbl+" VALUES (1, 2.5), (2, -1)"); err != nil {
				t.Fatal(err)
			}
			var sum float64
			if err := c.QueryRow(ctx, "SELECT sum(x) FROM "+tbl).Scan(&sum); err != nil {
				t.Fatal(err)
			}
			if sum != 1.5 {
				t.Errorf("sum(x) = %v, want 1.5", sum)
			}
		})
	}
	if len(names) != 2 {
		t.Fatalf("got %d schemas, want 2", len(names))
	}
	if names[0] == names[1] {
		t.Errorf("two schemas share the name %s", names[0])
	}
	for _, name := range names {
		if exists(t, name) {
			t.Errorf("schema %s still exists after its test ended", name)
		}
	}
}

func TestConn(t *testing.T) {
	var inner interface{ IsClosed() bool }
	t.Run("inner", func(t *testing.T) {
		conn := Conn(t)
		var got string
		if err := conn.QueryRow(t.Context(), "SELECT current_database()").Scan(&got); err != nil {
			t.Fatal(err)
		}
		if os.Getenv(EnvURL) == "" && got != "postgres" {
			t.Errorf("current_database() = %q, want postgres", got)
		}
		inner = conn
	})
	if inner == nil {
		t.Fatal("no connection")
	}
	if !inner.IsClosed() {
		t.Errorf("connection still open after its test ended")
	}
}
