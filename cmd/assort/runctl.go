package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"assort/schema"
)

// lockModel takes the model's advisory lock on conn, polling for up to
// wait; with wait zero it tries once. It returns a *busyError when another
// run keeps the lock.
func lockModel(ctx context.Context, conn *pgx.Conn, reg schema.Registry, model string, wait time.Duration) error {
	deadline := time.Now().Add(wait)
	for {
		ok, err := reg.TryLock(ctx, conn, model)
		if err != nil {
			return err
		}
		if ok {
			return nil
		}
		if !time.Now().Before(deadline) {
			return &busyError{model: model}
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(min(250*time.Millisecond, time.Until(deadline))):
		}
	}
}

// retryable reports whether err is the kind of failure that a fresh
// attempt may not meet: a lost connection, a server shutting down or
// ending the session, a serialization failure or a deadlock. Bad input is
// never retryable.
func retryable(err error) bool {
	var pgErr *pgconn.PgError
	if errors.As(err, &pgErr) {
		switch {
		case strings.HasPrefix(pgErr.Code, "08"), // connection exception
			pgErr.Code == "57P01", // admin shutdown, pg_terminate_backend
			pgErr.Code == "57P02", // crash shutdown
			pgErr.Code == "57P03", // cannot connect now
			pgErr.Code == "40001", // serialization failure
			pgErr.Code == "40P01": // deadlock detected
			return true
		}
		return false
	}
	var netErr net.Error
	var connectErr *pgconn.ConnectError
	return errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) || errors.As(err, &netErr) ||
		errors.As(err, &connectErr) || pgconn.SafeToRetry(err) || strings.Contains(err.Error(), "conn closed")
}

// withRetries runs job, and again from the start after a retryable
// failure, up to retries more times, waiting 1 s, 2 s, 4 s... (at most 30 s)
// between attempts. A run is never resumed half-way.
func withRetries[T any](ctx context.Context, e *env, retries int, job func() (T, error)) (T, error) {
	for attempt := 0; ; attempt++ {
		v, err := job()
		if err == nil || attempt >= retries || ctx.Err() != nil || !retryable(err) {
			return v, err
		}
		wait := 30 * time.Second
		if attempt < 5 {
			wait = time.Second << attempt
		}
		e.warnf("attempt %d of %d failed: %v; starting again in %s", attempt+1, retries+1, err, wait)
		select {
		case <-ctx.Done():
			return v, fmt.Errorf("%w (while waiting to retry after: %v)", ctx.Err(), err)
		case <-time.After(wait):
		}
	}
}

// abandonLimit bounds the clean-up of a failed run, which may have to open
// a connection of its own.
const abandonLimit = 10 * time.Second

// abandonRun removes the 'running' registry row of version of model after
// the run failed while alive (schema.Registry.Abandon). It uses the run's
// writer connection w when that still works; when w is gone (the server
// ended the session, or pgx closed it because ctx was cancelled in the
// middle of a statement, as on SIGINT during the COPY), it opens a short
// connection of its own. That connection does not hold the model's lock,
// and needs not: Abandon deletes only a row still 'running', and a run that
// took the lock since then has either marked the row failed already
// (schema.Registry.Recover) or finds it gone. ctx may be cancelled: the
// clean-up runs without it, bounded by abandonLimit.
func abandonRun(ctx context.Context, e *env, w *pgx.Conn, reg schema.Registry, model string, version int) error {
	ctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), abandonLimit)
	defer cancel()
	if !w.IsClosed() {
		err := reg.Abandon(ctx, w, model, version)
		if err == nil || !w.IsClosed() {
			return err
		}
	}
	c, err := e.connect(ctx, "fit "+model)
	if err != nil {
		return err
	}
	defer c.Close(ctx)
	return reg.Abandon(ctx, c, model, version)
}

// lockedConn opens the connection that holds a model's lock for a whole
// run: it connects (named role and model in pg_stat_activity), checks that
// the registry is current, and takes the lock, waiting up to wait. release
// gives the lock back and closes the connection.
func lockedConn(ctx context.Context, e *env, role, model string, wait time.Duration) (conn *pgx.Conn, release func(), err error) {
	conn, err = e.connect(ctx, role+" "+model)
	if err != nil {
		return nil, nil, err
	}
	bg := context.WithoutCancel(ctx)
	reg := schema.Registry{Schema: e.schema}
	if err := schema.Check(ctx, conn, e.schema); err != nil {
		conn.Close(bg)
		return nil, nil, err
	}
	if err := lockModel(ctx, conn, reg, model, wait); err != nil {
		conn.Close(bg)
		return nil, nil, err
	}
	return conn, func() {
		ctx, cancel := context.WithTimeout(bg, abandonLimit)
		defer cancel()
		reg.Unlock(ctx, conn, model)
		conn.Close(ctx)
	}, nil
}
