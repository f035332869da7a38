package main

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// procResult is what a measured child process did.
type procResult struct {
	Wall    time.Duration
	MaxRSS  int64  // peak resident set size in bytes; 0 when unknown
	RSSFrom string // where MaxRSS came from
	Stdout  []byte
	Stderr  []byte
}

// procSpec says how to run one measured child.
type procSpec struct {
	What   string    // names the run in errors; empty: the program's name
	Args   []string  // program and arguments
	Stdin  string    // file to read standard input from; empty: /dev/null
	Stdout io.Writer // nil: captured in procResult.Stdout
	// PeakRSS runs the child under GNU time -v (timeBin) and reads its
	// "Maximum resident set size"; when timeBin is empty, from wait4's
	// resource usage of the child, which is the same kernel figure.
	PeakRSS bool
}

// runProc runs a child in a process group of its own and returns its wall
// time, measured around start and wait (for psql this includes starting
// the process and connecting, a few milliseconds). When ctx ends, the group
// gets SIGINT (assort then rolls back and exits; GNU time ignores SIGINT,
// its child does not) and, 15 s later, the child is killed.
func runProc(ctx context.Context, ps procSpec, timeBin, tmp string) (procResult, error) {
	args := ps.Args
	var timeOut string
	if ps.PeakRSS && timeBin != "" {
		f, err := os.CreateTemp(tmp, "time-*.txt")
		if err != nil {
			return procResult{}, fmt.Errorf("run %s: %w", filepath.Base(args[0]), err)
		}
		timeOut = f.Name()
		if err := f.Close(); err != nil {
			return procResult{}, fmt.Errorf("run %s: %w", filepath.Base(args[0]), err)
		}
		// The file lies in the scratch directory, removed at the end.
		args = append([]string{timeBin, "-v", "-o", timeOut}, args...)
	}
	cmd := exec.CommandContext(ctx, args[0], args[1:]...)
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true, Pdeathsig: syscall.SIGTERM}
	cmd.Cancel = func() error { return syscall.Kill(-cmd.Process.Pid, syscall.SIGINT) }
	cmd.WaitDelay = 15 * time.Second
	if ps.Stdin != "" {
		f, err := os.Open(ps.Stdin)
		if err != nil {
			return procResult{}, fmt.Errorf("run %s: %w", filepath.Base(ps.Args[0]), err)
		}
		defer f.Close()
		cmd.Stdin = f
	}
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if ps.Stdout != nil {
		cmd.Stdout = ps.Stdout
	}
	start := time.Now()
	err := cmd.Run()
	res := procResult{Wall: time.Since(start), Stdout: stdout.Bytes(), Stderr: stderr.Bytes()}
	if err != nil {
		what := ps.What
		if what == "" {
			what = filepath.Base(ps.Args[0])
		}
		return res, fmt.Errorf("%s: %w: %s", what, err, tail(strings.TrimSpace(stderr.String()), 2000))
	}
	if ps.PeakRSS {
		if timeOut != "" {
			kb, err := parseTimeMaxRSS(timeOut)
			if err != nil {
				return res, err
			}
			res.MaxRSS, res.RSSFrom = kb*1024, "GNU time -v"
		} else if ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage); ok {
			res.MaxRSS, res.RSSFrom = ru.Maxrss*1024, "wait4 rusage (GNU time missing)"
		}
	}
	return res, nil
}

// parseTimeMaxRSS reads "Maximum resident set size (kbytes): N" from GNU
// time -v's output file.
func parseTimeMaxRSS(path string) (int64, error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, fmt.Errorf("read GNU time output: %w", err)
	}
	defer f.Close()
	return scanMaxRSS(f)
}

// scanMaxRSS finds GNU time -v's peak resident set size, in KiB.
func scanMaxRSS(r io.Reader) (int64, error) {
	const label = "Maximum resident set size (kbytes):"
	sc := bufio.NewScanner(r)
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		if v, ok := strings.CutPrefix(line, label); ok {
			kb, err := strconv.ParseInt(strings.TrimSpace(v), 10, 64)
			if err != nil {
				return 0, fmt.Errorf("GNU time output: %q: %w", line, err)
			}
			return kb, nil
		}
	}
	if err := sc.Err(); err != nil {
		return 0, fmt.Errorf("read GNU time output: %w", err)
	}
	return 0, errors.New("GNU time output has no maximum resident set size")
}

// findPSQL returns psql on PATH, else the newest Debian one.
func findPSQL() (string, error) {
	if p, err := exec.LookPath("psql"); err == nil {
		return p, nil
	}
	m, _ := filepath.Glob("/usr/lib/postgresql/*/bin/psql")
	sort.Slice(m, func(i, j int) bool { return pgMajor(m[i]) < pgMajor(m[j]) })
	if len(m) == 0 {
		return "", errors.New("psql not found on PATH nor in /usr/lib/postgresql/*/bin; install postgresql-client")
	}
	return m[len(m)-1], nil
}

// pgMajor is the major version in a path /usr/lib/postgresql/MAJOR/bin/psql.
func pgMajor(path string) int {
	v, _ := strconv.Atoi(filepath.Base(filepath.Dir(filepath.Dir(path))))
	return v
}

// median returns the median of xs (the mean of the middle two for an even
// count); xs is not modified.
func median(xs []float64) float64 {
	s := append([]float64(nil), xs...)
	sort.Float64s(s)
	n := len(s)
	if n == 0 {
		return 0
	}
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}
