package localpg

import (
	"context"
	"errors"
	"fmt"
	"maps"
	"net"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"time"

	"github.com/jackc/pgx/v5"
)

// Superuser is the name of the cluster's superuser, whatever OS account
// runs the server.
const Superuser = "postgres"

// startLimit bounds how long Start waits for the server to accept
// connections when ctx has no earlier deadline.
const startLimit = 2 * time.Minute

// portAttempts is how many loopback ports Start tries before giving up,
// should other processes keep taking the chosen port first.
const portAttempts = 5

// maxSocketDir is the longest socket directory path that leaves room for
// "/.s.PGSQL.65535" in a unix socket name (108 bytes on Linux, 104 on the
// BSDs, including the terminating NUL).
const maxSocketDir = 100 - len("/.s.PGSQL.65535")

// Options configures Start. The zero value starts a server in a new
// temporary directory, found binaries, default settings, and removes the
// directory on Stop.
type Options struct {
	// Dir is the directory to hold the cluster, its socket and its log.
	// It must not exist or be empty; Stop removes it unless Keep is set.
	// Empty means a new directory under os.TempDir().
	Dir string
	// Keep leaves the directory in place after Stop, for inspecting the
	// log.
	Keep bool
	// BinDir is the directory holding initdb and postgres. Empty means
	// FindBinDir.
	BinDir string
	// Settings add to or override DefaultSettings (name to value, passed
	// to postgres as -c name=value). The connection settings port,
	// listen_addresses and unix_socket_directories cannot be overridden.
	Settings map[string]string
}

// DefaultSettings returns the server settings Start uses unless
// Options.Settings overrides them: durability off for speed (this cluster
// is thrown away), modest memory, and the log written to stderr, which
// Start sends to server.log.
func DefaultSettings() map[string]string {
	return map[string]string{
		"fsync":              "off",
		"synchronous_commit": "off",
		"full_page_writes":   "off",
		"wal_level":          "minimal",
		"max_wal_senders":    "0",
		"shared_buffers":     "256MB",
		"max_connections":    "100",
		"logging_collector":  "off",
		"log_destination":    "stderr",
		"TimeZone":           "UTC",
	}
}

// Server is a running throwaway PostgreSQL server started by Start. Its
// methods may be called from several goroutines.
type Server struct {
	dir       string // top directory, removed by Stop unless keep
	dataDir   string // the cluster (PGDATA)
	sockDir   string // unix socket directory
	extraSock bool   // sockDir lies outside dir and is removed separately
	logPath   string
	port      int
	keep      bool
	bin       string            // directory of initdb and postgres
	acct      *serverAccount    // OS account of the server; nil: the caller's
	settings  map[string]string // DefaultSettings with Options.Settings applied

	proc   *os.Process
	exited chan struct{} // closed once the postmaster has exited
	waited error         // the postmaster's exit status, set before exited closes

	mu      sync.Mutex
	stopped bool
	stopErr error
}

// Start creates a cluster with initdb and starts a postmaster on it,
// returning once the server accepts connections. When the caller is root,
// initdb and postgres run as the "postgres" OS account (see the package
// documentation). On failure nothing is left running, the directory is
// removed unless opt.Keep, and the error carries the end of the log.
func Start(ctx context.Context, opt Options) (srv *Server, err error) {
	s, err := create(ctx, opt)
	if err != nil {
		return nil, err
	}
	defer func() {
		if err != nil && !opt.Keep {
			err = errors.Join(err, s.removeDirs())
		}
	}()
	ctx, cancel := context.WithTimeout(ctx, startLimit)
	defer cancel()
	for attempt := 1; ; attempt++ {
		port, err := freePort()
		if err != nil {
			return nil, fmt.Errorf("start postgresql: %w", err)
		}
		err = s.run(ctx, port)
		if err == nil {
			return s, nil
		}
		if !errors.Is(err, errPortTaken) || attempt == portAttempts {
			return nil, err
		}
	}
}

// create makes the server's directories and its cluster, ready for run.
// On failure it removes what it made unless opt.Keep.
func create(ctx context.Context, opt Options) (srv *Server, err error) {
	s := &Server{bin: opt.BinDir, keep: opt.Keep, settings: DefaultSettings()}
	if s.bin == "" {
		if s.bin, err = FindBinDir(); err != nil {
			return nil, err
		}
	} else if !hasServerBinaries(s.bin) {
		return nil, fmt.Errorf("start postgresql: %s does not hold initdb and postgres: %w", s.bin, ErrNotInstalled)
	}
	for k, v := range opt.Settings {
		s.settings[k] = v
	}
	if s.acct, err = accountFor(os.Geteuid()); err != nil {
		return nil, err
	}
	if s.dir, err = makeDir(opt.Dir); err != nil {
		return nil, err
	}
	defer func() {
		if err != nil && !opt.Keep {
			err = errors.Join(err, s.removeDirs())
		}
	}()
	if err := s.acct.chown(s.dir); err != nil {
		return nil, err
	}
	if err := s.acct.checkReachable(s.dir); err != nil {
		return nil, err
	}
	s.dataDir = filepath.Join(s.dir, "data")
	s.logPath = filepath.Join(s.dir, "server.log")
	if err := s.makeSocketDir(); err != nil {
		return nil, err
	}
	if err := s.initdb(ctx); err != nil {
		return nil, err
	}
	return s, nil
}

// openLog opens the server's log for appending.
func (s *Server) openLog() (*os.File, error) {
	f, err := os.OpenFile(s.logPath, os.O_WRONLY|os.O_CREATE|os.O_APPEND, 0o644)
	if err != nil {
		return nil, fmt.Errorf("start postgresql: open log: %w", err)
	}
	return f, nil
}

// makeDir creates the server's top directory: dir itself when given (it
// must be absent or empty), else a new temporary directory.
func makeDir(dir string) (string, error) {
	if dir == "" {
		d, err := os.MkdirTemp("", "assort-pg-")
		if err != nil {
			return "", fmt.Errorf("start postgresql: make directory: %w", err)
		}
		return d, nil
	}
	abs, err := filepath.Abs(dir)
	if err != nil {
		return "", fmt.Errorf("start postgresql: directory %s: %w", dir, err)
	}
	if err := os.MkdirAll(abs, 0o700); err != nil {
		return "", fmt.Errorf("start postgresql: make directory: %w", err)
	}
	entries, err := os.ReadDir(abs)
	if err != nil {
		return "", fmt.Errorf("start postgresql: directory %s: %w", abs, err)
	}
	if len(entries) > 0 {
		return "", fmt.Errorf("start postgresql: directory %s is not empty", abs)
	}
	return abs, nil
}

// makeSocketDir creates the private unix socket directory: dir/sock, or a
// new directory under /tmp when that path would be too long.
func (s *Server) makeSocketDir() error {
	s.sockDir = filepath.Join(s.dir, "sock")
	if len(s.sockDir) <= maxSocketDir {
		if err := os.Mkdir(s.sockDir, 0o700); err != nil {
			return fmt.Errorf("start postgresql: make socket directory: %w", err)
		}
	} else {
		d, err := os.MkdirTemp("/tmp", "assort-pgs-")
		if err != nil {
			return fmt.Errorf("start postgresql: make socket directory: %w", err)
		}
		s.sockDir, s.extraSock = d, true
	}
	return s.acct.chown(s.sockDir)
}

// initdb creates the cluster in s.dataDir, writing initdb's output to the
// log.
func (s *Server) initdb(ctx context.Context) (err error) {
	log, err := s.openLog()
	if err != nil {
		return err
	}
	cmd := exec.CommandContext(ctx, filepath.Join(s.bin, "initdb"),
		"--pgdata", s.dataDir,
		"--username", Superuser,
		"--auth", "trust", // local, 127.0.0.1/32 and ::1/128 only
		"--encoding", "UTF8",
		"--no-locale",
		"--no-sync",
	)
	cmd.Dir = s.dir
	cmd.Env = childEnv()
	cmd.Stdout, cmd.Stderr = log, log
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: s.acct.credential()}
	err = cmd.Run()
	if cerr := log.Close(); cerr != nil && err == nil {
		return fmt.Errorf("start postgresql: close log: %w", cerr)
	}
	if err != nil {
		return fmt.Errorf("start postgresql: initdb: %w\n--- initdb output (end) ---\n%s", err, logTail(s.logPath, 4096))
	}
	return nil
}

// errPortTaken reports that the postmaster could not bind its TCP port.
var errPortTaken = errors.New("port taken")

// run starts the postmaster on port and waits until it accepts
// connections. On failure the postmaster is not running; the error wraps
// errPortTaken when the port was taken by another process.
func (s *Server) run(ctx context.Context, port int) (err error) {
	settings := maps.Clone(s.settings)
	settings["port"] = strconv.Itoa(port)
	settings["listen_addresses"] = "127.0.0.1"
	settings["unix_socket_directories"] = quoteList(s.sockDir)
	names := make([]string, 0, len(settings))
	for k := range settings {
		names = append(names, k)
	}
	sort.Strings(names)
	args := []string{"-D", s.dataDir}
	for _, k := range names {
		args = append(args, "-c", k+"="+settings[k])
	}
	logStart := logSize(s.logPath)
	log, err := s.openLog()
	if err != nil {
		return err
	}
	// The postmaster has its own copy of the descriptor once started.
	defer func() {
		if cerr := log.Close(); cerr != nil && err == nil {
			err = fmt.Errorf("start postgresql: close log: %w", cerr)
		}
	}()
	cmd := exec.Command(filepath.Join(s.bin, "postgres"), args...)
	cmd.Dir = s.dir
	cmd.Env = childEnv()
	cmd.Stdout, cmd.Stderr = log, log
	cmd.SysProcAttr = sysProcAttr(s.acct.credential())

	// The parent-death signal fires when the thread that forked the child
	// exits, so that thread stays locked to this goroutine, blocked in
	// Wait, for as long as the postmaster runs.
	started := make(chan error, 1)
	exited := make(chan struct{})
	go func() {
		runtime.LockOSThread()
		defer runtime.UnlockOSThread()
		if err := cmd.Start(); err != nil {
			started <- err
			return
		}
		started <- nil
		s.waited = cmd.Wait()
		close(exited)
	}()
	if err := <-started; err != nil {
		return fmt.Errorf("start postgresql: run postgres: %w", err)
	}
	s.proc, s.exited, s.port = cmd.Process, exited, port

	if err := s.waitReady(ctx); err != nil {
		s.kill()
		log := logFrom(s.logPath, logStart)
		if len(log) > 4096 {
			log = log[len(log)-4096:]
			if i := strings.IndexByte(log, '\n'); i >= 0 {
				log = log[i+1:]
			}
		}
		log = strings.TrimRight(log, "\n")
		if strings.Contains(log, "could not create any TCP/IP sockets") {
			err = fmt.Errorf("%w: %w", errPortTaken, err)
		}
		return fmt.Errorf("start postgresql on port %d: %w\n--- server log (end) ---\n%s", port, err, log)
	}
	return nil
}

// waitReady polls the server over TCP until it accepts a connection, the
// postmaster exits, or ctx is done.
func (s *Server) waitReady(ctx context.Context) error {
	tick := time.NewTicker(50 * time.Millisecond)
	defer tick.Stop()
	var last error
	for {
		select {
		case <-s.exited:
			return fmt.Errorf("postgres exited: %v", s.waited)
		default:
		}
		if last = s.ping(ctx); last == nil {
			return nil
		}
		select {
		case <-s.exited:
			return fmt.Errorf("postgres exited: %v", s.waited)
		case <-ctx.Done():
			return fmt.Errorf("wait for connections: %w (last attempt: %v)", ctx.Err(), last)
		case <-tick.C:
		}
	}
}

// ping makes one connection to the postgres database and closes it.
func (s *Server) ping(ctx context.Context) error {
	ctx, cancel := context.WithTimeout(ctx, 2*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, s.URL("postgres"))
	if err != nil {
		return err
	}
	return conn.Close(ctx)
}

// kill ends the postmaster at once (SIGQUIT, then SIGKILL) and waits for
// it; used when start-up fails.
func (s *Server) kill() {
	for _, sig := range []os.Signal{syscall.SIGQUIT, syscall.SIGKILL} {
		// An error here means the process has already gone; exited says so.
		_ = s.proc.Signal(sig)
		select {
		case <-s.exited:
			return
		case <-time.After(5 * time.Second):
		}
	}
	<-s.exited
}

// Stop shuts the server down with a fast shutdown (SIGINT: sessions are
// ended and open transactions rolled back) and, unless Options.Keep was
// set, removes its directory. If ctx is done before the server has exited,
// it is ended with SIGQUIT, then SIGKILL. Calling Stop again returns the
// first call's result.
func (s *Server) Stop(ctx context.Context) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.stopped {
		return s.stopErr
	}
	s.stopped = true
	s.stopErr = s.shutdown(ctx)
	if !s.keep {
		if err := s.removeDirs(); err != nil && s.stopErr == nil {
			s.stopErr = err
		}
	}
	return s.stopErr
}

// shutdown sends the fast-shutdown signal and waits for the postmaster.
func (s *Server) shutdown(ctx context.Context) error {
	select {
	case <-s.exited:
		return fmt.Errorf("stop postgresql: server had already exited (%v)\n--- server log (end) ---\n%s", s.waited, logTail(s.logPath, 4096))
	default:
	}
	if err := s.proc.Signal(syscall.SIGINT); err != nil {
		return fmt.Errorf("stop postgresql: signal pid %d: %w", s.proc.Pid, err)
	}
	select {
	case <-s.exited:
		if s.waited != nil {
			return fmt.Errorf("stop postgresql: %w", s.waited)
		}
		return nil
	case <-ctx.Done():
		s.kill()
		return fmt.Errorf("stop postgresql: fast shutdown: %w; server killed", ctx.Err())
	}
}

// removeDirs removes the server's directories.
func (s *Server) removeDirs() error {
	var errs []error
	if s.extraSock {
		errs = append(errs, os.RemoveAll(s.sockDir))
	}
	errs = append(errs, os.RemoveAll(s.dir))
	if err := errors.Join(errs...); err != nil {
		return fmt.Errorf("stop postgresql: remove directory: %w", err)
	}
	return nil
}

// URL returns a postgres:// URL for database db (empty means "postgres")
// over TCP on 127.0.0.1, as the superuser, without TLS.
func (s *Server) URL(db string) string {
	if db == "" {
		db = "postgres"
	}
	u := url.URL{
		Scheme:   "postgres",
		User:     url.User(Superuser),
		Host:     net.JoinHostPort("127.0.0.1", strconv.Itoa(s.port)),
		Path:     "/" + db,
		RawQuery: "sslmode=disable",
	}
	return u.String()
}

// Port returns the server's TCP port on 127.0.0.1 (and the number in its
// unix socket's name).
func (s *Server) Port() int { return s.port }

// SocketDir returns the directory holding the server's unix socket, for
// host= in a libpq connection string.
func (s *Server) SocketDir() string { return s.sockDir }

// Dir returns the server's top directory, holding data/, the log and
// usually sock/.
func (s *Server) Dir() string { return s.dir }

// LogPath returns the path of the server's log file.
func (s *Server) LogPath() string { return s.logPath }

// PID returns the process id of the postmaster.
func (s *Server) PID() int { return s.proc.Pid }

// CreateDatabase creates database name on the server.
func (s *Server) CreateDatabase(ctx context.Context, name string) (err error) {
	conn, err := pgx.Connect(ctx, s.URL("postgres"))
	if err != nil {
		return fmt.Errorf("create database %q: connect: %w", name, err)
	}
	defer func() {
		if cerr := conn.Close(ctx); cerr != nil && err == nil {
			err = fmt.Errorf("create database %q: close: %w", name, cerr)
		}
	}()
	if _, err := conn.Exec(ctx, "CREATE DATABASE "+pgx.Identifier{name}.Sanitize()); err != nil {
		return fmt.Errorf("create database %q: %w", name, err)
	}
	return nil
}

// freePort returns a TCP port on 127.0.0.1 that was free a moment ago,
// found by binding port 0 and closing the listener.
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, fmt.Errorf("find a free port: %w", err)
	}
	port := l.Addr().(*net.TCPAddr).Port
	if err := l.Close(); err != nil {
		return 0, fmt.Errorf("find a free port: %w", err)
	}
	return port, nil
}

// childEnv is the environment of initdb and postgres: PATH, and the C
// locale so that messages (and the checks on them) are in English. PG*
// variables of the caller are left out on purpose.
func childEnv() []string {
	return []string{"PATH=" + os.Getenv("PATH"), "LC_ALL=C", "LANG=C"}
}

// quoteList quotes a path for a PostgreSQL list setting such as
// unix_socket_directories when it holds a separator.
func quoteList(p string) string {
	if strings.ContainsAny(p, ", \t\"") {
		return `"` + strings.ReplaceAll(p, `"`, `""`) + `"`
	}
	return p
}

// logSize returns the current size of the file at path, 0 if unknown.
func logSize(path string) int64 {
	fi, err := os.Stat(path)
	if err != nil {
		return 0
	}
	return fi.Size()
}

// logFrom returns the file at path from byte off on; empty if it cannot be
// read.
func logFrom(path string, off int64) string {
	b, err := os.ReadFile(path)
	if err != nil || off > int64(len(b)) {
		return ""
	}
	return string(b[off:])
}

// logTail returns about the last max bytes of the file at path, starting
// at a line boundary; a note when it cannot be read.
func logTail(path string, max int64) string {
	f, err := os.Open(path)
	if err != nil {
		return fmt.Sprintf("(log unavailable: %v)", err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return fmt.Sprintf("(log unavailable: %v)", err)
	}
	// One byte before the cut is read too, so that a cut falling just
	// after a newline keeps the whole line that follows.
	off := fi.Size() - max - 1
	if off < 0 {
		off = 0
	}
	buf := make([]byte, fi.Size()-off)
	if _, err := f.ReadAt(buf, off); err != nil {
		return fmt.Sprintf("(log unavailable: %v)", err)
	}
	text := string(buf)
	if off > 0 {
		if i := strings.IndexByte(text, '\n'); i >= 0 {
			text = text[i+1:]
		}
	}
	return strings.TrimRight(text, "\n")
}
