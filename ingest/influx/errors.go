package influx

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"strings"
	"syscall"
	"time"

	ihttp "github.com/influxdata/influxdb-client-go/v2/api/http"
)

// ErrUnavailable is wrapped by errors returned after the retries for a
// transient failure (unreachable server, timeouts, 429, 5xx) ran out.
var ErrUnavailable = errors.New("server unavailable")

// ConfigError is a request the server refused because of a setting that
// retrying cannot fix. Setting is "token", "org" or "bucket".
type ConfigError struct {
	Op         string // "query", "write" or "check"
	URL        string // redacted
	Setting    string
	StatusCode int
	Hint       string // what the setting should look like
	Err        error  // the client library's error
}

func (e *ConfigError) Error() string {
	return fmt.Sprintf("influx: %s refused by %s with status %d: check the %s setting (%s): %v",
		e.Op, e.URL, e.StatusCode, e.Setting, e.Hint, e.Err)
}

func (e *ConfigError) Unwrap() error { return e.Err }

// verdict is what to do about one failed attempt.
type verdict struct {
	retry      bool
	retryAfter time.Duration
	final      error // non-nil: stop and return this
}

// classify sorts a failed attempt; parent is the caller's context (not the
// per-attempt one), so that an attempt timeout is retried but a cancelled
// caller is not.
func (c *Client) classify(parent context.Context, op string, err error) verdict {
	if parent.Err() != nil {
		return verdict{final: fmt.Errorf("influx: %s: %w", op, err)}
	}
	var qe errQL
	if errors.As(err, &qe) {
		// /query answers a wrong database or retention policy, and a
		// query it cannot run, with 200 and the error inside.
		if m := strings.ToLower(qe.msg); strings.Contains(m, "database not found") || strings.Contains(m, "retention policy not found") {
			return verdict{final: &ConfigError{Op: op, URL: redactURL(c.conn.URL), Setting: "bucket", StatusCode: 200,
				Hint: fmt.Sprintf("now %q; for InfluxQL the database (\"db\" or \"db/rp\")", c.conn.Bucket), Err: err}}
		}
		return verdict{final: fmt.Errorf("influx: %s at %s: %w", op, redactURL(c.conn.URL), err)}
	}
	var he *ihttp.Error
	if errors.As(err, &he) && he.StatusCode != 0 {
		msg := strings.ToLower(he.Message + " " + he.Code)
		cfg := func(setting, hint string) verdict {
			return verdict{final: &ConfigError{Op: op, URL: redactURL(c.conn.URL), Setting: setting,
				StatusCode: he.StatusCode, Hint: hint, Err: err}}
		}
		tokenHint := "2.x: an API token with read/write access to the bucket; 1.8: \"user:password\", empty when auth is off"
		bucketHint := fmt.Sprintf("now %q; 2.x: an existing bucket; 1.8: \"db/rp\" or \"db\" of an existing database", c.conn.Bucket)
		switch s := he.StatusCode; {
		case s == 401 || s == 403:
			return cfg("token", tokenHint)
		case s == 404 && strings.Contains(msg, "organization"):
			return cfg("org", fmt.Sprintf("now %q; 2.x: the organisation name or id; ignored by 1.8", c.conn.Org))
		case s == 404:
			return cfg("bucket", bucketHint)
		case s == 500 && (strings.Contains(msg, "retention policy") || strings.Contains(msg, "no database") ||
			strings.Contains(msg, "database not found")):
			// 1.8 answers a wrong database or retention policy with 500.
			return cfg("bucket", bucketHint)
		case s == 429:
			return verdict{retry: true, retryAfter: time.Duration(he.RetryAfter) * time.Second}
		case s >= 500:
			return verdict{retry: true, retryAfter: time.Duration(he.RetryAfter) * time.Second}
		}
		return verdict{final: fmt.Errorf("influx: %s at %s: %w", op, redactURL(c.conn.URL), err)}
	}
	if transient(err) {
		return verdict{retry: true}
	}
	return verdict{final: fmt.Errorf("influx: %s at %s: %w", op, redactURL(c.conn.URL), err)}
}

// transient reports a failure with no HTTP status that may pass: refused or
// reset connections, a cut stream, an attempt timeout.
func transient(err error) bool {
	var he *ihttp.Error
	if errors.As(err, &he) && he.StatusCode == 0 {
		return true
	}
	// QueryTableResult.Next flattens a read error that Close reports again
	// into errors.New("unexpected EOF,unexpected EOF"): match the text too.
	msg := err.Error()
	for _, s := range []string{"unexpected EOF", "connection reset", "broken pipe", "connection refused", "context deadline exceeded"} {
		if strings.Contains(msg, s) {
			return true
		}
	}
	var ne net.Error
	return errors.Is(err, context.DeadlineExceeded) ||
		errors.Is(err, io.ErrUnexpectedEOF) ||
		errors.Is(err, io.EOF) ||
		errors.Is(err, syscall.ECONNRESET) ||
		errors.Is(err, syscall.ECONNREFUSED) ||
		errors.Is(err, syscall.EPIPE) ||
		errors.As(err, &ne)
}

// retry runs fn until it succeeds, fails for good, or the attempts run out.
// Each attempt gets its own deadline of timeout.
func (c *Client) retry(ctx context.Context, op string, timeout time.Duration, fn func(ctx context.Context) error) error {
	r := c.opt.Retry
	for attempt := 1; ; attempt++ {
		actx, cancel := context.WithTimeout(ctx, timeout)
		err := fn(actx)
		cancel()
		if err == nil {
			return nil
		}
		v := c.classify(ctx, op, err)
		if v.final != nil {
			return v.final
		}
		if attempt >= r.Attempts {
			return fmt.Errorf("influx: %s at %s: %w after %d attempts: %w", op, redactURL(c.conn.URL), ErrUnavailable, attempt, err)
		}
		if serr := r.sleep(ctx, r.wait(attempt, v.retryAfter)); serr != nil {
			return fmt.Errorf("influx: %s: %w while waiting to retry after: %v", op, serr, err)
		}
	}
}
