package main

import (
	"fmt"
	"io"
	"os"
	"sync"
	"sync/atomic"
	"time"
)

// Progress of a pass over the rows is shown on stderr, unless --quiet:
//
//   - on a terminal (stderr is a character device), as one live line
//     redrawn in place with a carriage return every redrawEvery: the pass,
//     the rows done (of how many, when that is known), the rate, and the
//     time left when the total is known; the line is erased when the pass
//     ends, and the pass's summary line follows as usual;
//   - anywhere else (a log file, a pipe), as a plain line with a date and
//     time every logEvery, so that a scheduler's log shows a long pass
//     moving without filling up.
//
// The counts come from the pass itself (a chunk read, a chunk written, a
// chunk the fit scanned), so a pass that stalls shows no new line until it
// moves again.
const (
	redrawEvery = 200 * time.Millisecond
	logEvery    = 10 * time.Second
)

// meter shows the progress of one pass. Its methods may be called from
// any goroutine; a nil *meter does nothing.
type meter struct {
	w     io.Writer
	name  string
	total int64 // rows the pass will do; 0 when not known
	tty   bool
	start time.Time

	done   atomic.Int64
	mu     sync.Mutex // serializes output and guards the fields below
	last   time.Time  // when a line was last shown
	shown  bool       // a live line is on the terminal
	status string     // what the pass is doing, shown after the counts
}

// setStatus sets what the pass is doing, such as a fit's iteration and
// objective; the next progress line shows it.
func (m *meter) setStatus(s string) {
	if m == nil {
		return
	}
	m.mu.Lock()
	m.status = s
	m.mu.Unlock()
}

// meter starts the progress of a pass called name over total rows (0 when
// not known). It returns nil under --quiet.
func (e *env) meter(name string, total int64) *meter {
	if e.quiet {
		return nil
	}
	now := time.Now()
	return &meter{w: e.stderr, name: name, total: total, tty: isTerminal(e.stderr), start: now, last: now}
}

// isTerminal reports whether w is a character device, such as a terminal.
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	fi, err := f.Stat()
	return err == nil && fi.Mode()&os.ModeCharDevice != 0
}

// add counts n more rows done and shows the progress when it is time.
func (m *meter) add(n int) {
	if m == nil {
		return
	}
	done := m.done.Add(int64(n))
	every := logEvery
	if m.tty {
		every = redrawEvery
	}
	now := time.Now()
	if !m.mu.TryLock() {
		return // another goroutine is showing it
	}
	defer m.mu.Unlock()
	if now.Sub(m.last) < every {
		return
	}
	m.last = now
	line := m.line(done, now)
	if m.tty {
		fmt.Fprintf(m.w, "\r%s\033[K", line)
		m.shown = true
	} else {
		fmt.Fprintf(m.w, "assort: %s %s\n", now.Format("2006-01-02 15:04:05"), line)
	}
}

// line describes the progress after done rows.
func (m *meter) line(done int64, now time.Time) string {
	secs := now.Sub(m.start).Seconds()
	rate := float64(done) / max(secs, 1e-9)
	s := fmt.Sprintf("%s: %d rows", m.name, done)
	if m.total > 0 {
		s = fmt.Sprintf("%s: %d of %d rows (%.0f%%)", m.name, done, m.total, 100*float64(done)/float64(m.total))
	}
	s += fmt.Sprintf(", %s rows/s", siCount(rate))
	if m.total > 0 && done > 0 && done < m.total {
		left := time.Duration(float64(m.total-done) / rate * float64(time.Second))
		s += ", " + left.Round(time.Second).String() + " left"
	}
	if m.status != "" {
		s += "; " + m.status
	}
	return s
}

// printf shows a message during the pass, on a line of its own.
func (m *meter) printf(e *env, format string, args ...any) {
	if m == nil {
		e.logf(format, args...)
		return
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	m.erase()
	e.logf(format, args...)
}

// end finishes the pass: it erases the live line.
func (m *meter) end() {
	if m == nil {
		return
	}
	m.mu.Lock()
	defer m.mu.Unlock()
	m.erase()
}

// erase removes the live line; the caller holds mu.
func (m *meter) erase() {
	if m.shown {
		fmt.Fprint(m.w, "\r\033[K")
		m.shown = false
	}
}

// rows is the number of rows counted.
func (m *meter) rows() int64 {
	if m == nil {
		return 0
	}
	return m.done.Load()
}

// siCount renders a count with an SI prefix and three significant digits:
// 950, 12.3k, 4.56M.
func siCount(v float64) string {
	switch {
	case v >= 1e9:
		return fmt.Sprintf("%.3gG", v/1e9)
	case v >= 1e6:
		return fmt.Sprintf("%.3gM", v/1e6)
	case v >= 1e3:
		return fmt.Sprintf("%.3gk", v/1e3)
	}
	return fmt.Sprintf("%.0f", v)
}
