//go:build linux

package localpg

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"
)

// orphanEnv, when set in the environment, turns the test binary into a
// helper that starts a server in the named directory, prints its pid and
// waits to be killed (see TestParentDeath).
const orphanEnv = "ASSORT_LOCALPG_ORPHAN_DIR"

func TestMain(m *testing.M) {
	if dir := os.Getenv(orphanEnv); dir != "" {
		os.Exit(orphanMain(dir))
	}
	os.Exit(m.Run())
}

// orphanMain starts a server and never stops it; its parent test kills
// this process.
func orphanMain(dir string) int {
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	srv, err := Start(ctx, Options{Dir: dir, Keep: true})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	fmt.Printf("pid %d\n", srv.PID())
	time.Sleep(10 * time.Minute)
	return 2
}

// TestParentDeath checks that a server whose parent process is killed
// without calling Stop shuts itself down (fast shutdown, by the
// parent-death signal) instead of lingering.
func TestParentDeath(t *testing.T) {
	dir := tempName(t, "assort-pg-orphan-")
	t.Cleanup(func() {
		if err := os.RemoveAll(dir); err != nil {
			t.Error(err)
		}
	})
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), orphanEnv+"="+dir)
	cmd.Stderr = os.Stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	line, rerr := bufio.NewReader(out).ReadString('\n')
	if err := cmd.Process.Kill(); err != nil {
		t.Fatalf("kill helper: %v", err)
	}
	// The helper was killed, so Wait reports the signal; that is expected.
	_ = cmd.Wait()
	if rerr != nil {
		t.Fatalf("helper did not report a server: %v", rerr)
	}
	pid, err := strconv.Atoi(strings.TrimSpace(strings.TrimPrefix(line, "pid ")))
	if err != nil {
		t.Fatalf("helper said %q: %v", line, err)
	}

	deadline := time.Now().Add(time.Minute)
	for alive(pid) && time.Now().Before(deadline) {
		time.Sleep(50 * time.Millisecond)
	}
	if alive(pid) {
		if err := syscall.Kill(pid, syscall.SIGQUIT); err != nil {
			t.Errorf("kill lingering postmaster %d: %v", pid, err)
		}
		t.Fatalf("postmaster %d still running a minute after its parent died", pid)
	}
	log := logTail(filepath.Join(dir, "server.log"), 4096)
	// PostgreSQL's log lines for SIGINT and for the end of shutdown.
	for _, want := range []string{"received fast shutdown request", "database system is shut down"} {
		if !strings.Contains(log, want) {
			t.Errorf("server log lacks %q; it ends:\n%s", want, log)
		}
	}
}

// alive reports whether process pid exists and is not a zombie.
func alive(pid int) bool {
	if err := syscall.Kill(pid, 0); err != nil {
		return false
	}
	stat, err := os.ReadFile("/proc/" + strconv.Itoa(pid) + "/stat")
	if err != nil {
		return false
	}
	// The state follows the command name, which is in parentheses.
	s := string(stat)
	i := strings.LastIndexByte(s, ')')
	return i < 0 || i+2 >= len(s) || s[i+2] != 'Z'
}

// processUID returns the real user id of process pid.
func processUID(pid int) (uint32, error) {
	status, err := os.ReadFile("/proc/" + strconv.Itoa(pid) + "/status")
	if err != nil {
		return 0, err
	}
	for _, line := range strings.Split(string(status), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "Uid:" {
			uid, err := strconv.ParseUint(f[1], 10, 32)
			return uint32(uid), err
		}
	}
	return 0, fmt.Errorf("no Uid line in /proc/%d/status", pid)
}

// fileUID returns the owner of the file described by fi.
func fileUID(fi os.FileInfo) uint32 {
	return fi.Sys().(*syscall.Stat_t).Uid
}
