package alert

import (
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net/http"
	"net/url"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"
)

// Notifier sends the new and cleared events of one evaluation.
type Notifier interface {
	Notify(ctx context.Context, evs []Event) error
}

// Notifiable returns the events that notifiers send: new and cleared ones.
func Notifiable(evs []Event) []Event {
	var out []Event
	for _, e := range evs {
		if e.Status == StatusNew || e.Status == StatusCleared {
			out = append(out, e)
		}
	}
	return out
}

// LogNotifier writes each event as one structured log line. Restrictions,
// excess outflow and tank leaks are logged at warn level, sensor faults at
// info level, cleared findings at info level.
type LogNotifier struct{ Logger *slog.Logger }

// Notify implements Notifier.
func (n LogNotifier) Notify(ctx context.Context, evs []Event) error {
	for _, e := range evs {
		f := e.Finding
		lvl := slog.LevelWarn
		if e.Status == StatusCleared || f.Kind == "sensor_fault" {
			lvl = slog.LevelInfo
		}
		n.Logger.Log(ctx, lvl, "finding",
			"status", string(e.Status), "tank", f.Tank, "kind", f.Kind, "subtype", f.Subtype,
			"magnitude_pct", round(f.MagnitudePct, 1), "onset", f.Onset.Format(time.RFC3339),
			"statistic", f.Statistic, "evidence", f.Evidence)
	}
	return nil
}

// WebhookNotifier posts each batch of events as one JSON document to URL.
// It retries transport errors, 429 and 5xx up to three times with backoff.
// The URL may hold a secret: it is never logged and errors show only its host.
type WebhookNotifier struct {
	URL    string
	Client *http.Client // nil means a client with a 10 s timeout
	// Secret, when set, signs every request (see Sign): the receiver can
	// tell it came from this drainsight and was not replayed.
	Secret string
	now    func() time.Time // replaced in tests
}

// The headers of a signed webhook request.
const (
	HeaderTimestamp = "Drainsight-Timestamp" // Unix seconds of the request
	HeaderSignature = "Drainsight-Signature" // "sha256=" + hex HMAC
)

// Sign returns the signature of a webhook request: HMAC-SHA256 (RFC 2104
// with FIPS 180-4 SHA-256) keyed with the shared secret over the
// timestamp header's value, a full stop and the raw body, as
// "sha256=<64 hex digits>". A receiver recomputes it over the bytes it got,
// compares the two in constant time (hmac.Equal) and rejects a timestamp
// more than a few minutes from its own clock (a replayed request).
func Sign(secret, timestamp string, body []byte) string {
	m := hmac.New(sha256.New, []byte(secret))
	m.Write([]byte(timestamp))
	m.Write([]byte{'.'})
	m.Write(body)
	return "sha256=" + hex.EncodeToString(m.Sum(nil))
}

// Verify checks a signed request as a receiver would: the signature over
// timestamp and body, and the timestamp within tolerance of now.
func Verify(secret, timestamp, signature string, body []byte, now time.Time, tolerance time.Duration) error {
	ts, err := strconv.ParseInt(timestamp, 10, 64)
	if err != nil {
		return fmt.Errorf("alert: webhook timestamp %q: not Unix seconds", timestamp)
	}
	if d := now.Sub(time.Unix(ts, 0)); d > tolerance || d < -tolerance {
		return fmt.Errorf("alert: webhook timestamp %s is %v from now (tolerance %v): a replay or a wrong clock", timestamp, d.Round(time.Second), tolerance)
	}
	if !hmac.Equal([]byte(Sign(secret, timestamp, body)), []byte(signature)) {
		return errors.New("alert: webhook signature does not match")
	}
	return nil
}

// webhookBody is the documented webhook payload (see README).
type webhookBody struct {
	Source  string         `json:"source"`
	Caution string         `json:"caution"`
	Events  []webhookEvent `json:"events"`
}

type webhookEvent struct {
	// ID is the transition's stable id (Event.ID): the same on every
	// delivery attempt, so a receiver drops repeats on it.
	ID           string    `json:"id"`
	Status       string    `json:"status"`
	At           time.Time `json:"at"`
	Tank         string    `json:"tank"`
	Kind         string    `json:"kind"`
	Subtype      string    `json:"subtype,omitempty"`
	Onset        time.Time `json:"onset"`
	MagnitudePct float64   `json:"magnitude_pct"`
	Evidence     string    `json:"evidence"`
}

// payload is the document webhooks and commands receive (see README).
func payload(evs []Event) ([]byte, error) {
	body := webhookBody{Source: "drainsight", Caution: Caution}
	for _, e := range evs {
		f := e.Finding
		body.Events = append(body.Events, webhookEvent{ID: e.ID(), Status: string(e.Status), At: e.At, Tank: f.Tank,
			Kind: f.Kind, Subtype: f.Subtype, Onset: f.Onset, MagnitudePct: round(f.MagnitudePct, 2), Evidence: f.Evidence})
	}
	return json.Marshal(body)
}

// Notify implements Notifier.
func (n WebhookNotifier) Notify(ctx context.Context, evs []Event) error {
	if len(evs) == 0 {
		return nil
	}
	buf, err := payload(evs)
	if err != nil {
		return fmt.Errorf("alert: webhook: %w", err)
	}
	client := n.Client
	if client == nil {
		client = &http.Client{Timeout: 10 * time.Second}
	}
	host := "webhook"
	if u, err := url.Parse(n.URL); err == nil {
		host = u.Host
	}
	var last error
	for attempt := range 4 {
		if attempt > 0 {
			select {
			case <-ctx.Done():
				return fmt.Errorf("alert: webhook %s: %w", host, ctx.Err())
			case <-time.After(time.Duration(1<<attempt) * 250 * time.Millisecond):
			}
		}
		req, err := http.NewRequestWithContext(ctx, http.MethodPost, n.URL, bytes.NewReader(buf))
		if err != nil {
			return fmt.Errorf("alert: webhook: bad url (setting outputs.alert.webhook_url)")
		}
		req.Header.Set("Content-Type", "application/json")
		if n.Secret != "" {
			clock := n.now
			if clock == nil {
				clock = time.Now
			}
			ts := strconv.FormatInt(clock().Unix(), 10)
			req.Header.Set(HeaderTimestamp, ts)
			req.Header.Set(HeaderSignature, Sign(n.Secret, ts, buf))
		}
		resp, err := client.Do(req)
		if err != nil {
			var ue *url.Error
			if errors.As(err, &ue) {
				err = ue.Err // the url may hold a secret
			}
			last = fmt.Errorf("alert: webhook %s: %w", host, err)
			continue
		}
		io.Copy(io.Discard, io.LimitReader(resp.Body, 1<<16))
		resp.Body.Close()
		switch {
		case resp.StatusCode < 300:
			return nil
		case resp.StatusCode == 429 || resp.StatusCode >= 500:
			last = fmt.Errorf("alert: webhook %s: status %d", host, resp.StatusCode)
			continue
		default:
			return fmt.Errorf("alert: webhook %s: status %d (check outputs.alert.webhook_url)", host, resp.StatusCode)
		}
	}
	return last
}

// WriteTable prints events as an aligned table for people.
func WriteTable(w io.Writer, evs []Event) error {
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "TANK\tFINDING\tSTATUS\tAT\tCHANGE\tONSET\tEVIDENCE")
	for _, e := range evs {
		f := e.Finding
		kind := f.Kind
		if f.Subtype != "" {
			kind += "/" + f.Subtype
		}
		change := "-"
		if !math.IsNaN(f.MagnitudePct) && f.MagnitudePct != 0 {
			change = fmt.Sprintf("%+.1f %%", f.MagnitudePct)
		}
		onset := "-"
		if !f.Onset.IsZero() {
			onset = f.Onset.UTC().Format("2006-01-02")
		}
		at := "-"
		if !e.At.IsZero() {
			at = e.At.UTC().Format("2006-01-02")
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\n", f.Tank, kind, e.Status, at, change, onset, oneLine(f.Evidence, 80))
	}
	return tw.Flush()
}

func oneLine(s string, max int) string {
	s = strings.Join(strings.Fields(s), " ")
	if r := []rune(s); len(r) > max {
		return string(r[:max-1]) + "…"
	}
	return s
}

func round(x float64, digits int) float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return 0
	}
	p := math.Pow(10, float64(digits))
	return math.Round(x*p) / p
}
