package main

import (
	"bytes"
	"io"
	"net"
	"net/mail"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/emersion/go-smtp"
)

// relay is a real SMTP server (go-smtp) run in the test: a local relay
// without TLS or AUTH that keeps what it accepts.
type relay struct {
	mu   sync.Mutex
	msgs [][]byte
}

type relaySession struct{ r *relay }

func (r *relay) NewSession(*smtp.Conn) (smtp.Session, error) { return relaySession{r}, nil }
func (relaySession) Mail(string, *smtp.MailOptions) error    { return nil }
func (relaySession) Rcpt(string, *smtp.RcptOptions) error    { return nil }
func (relaySession) Reset()                                  {}
func (relaySession) Logout() error                           { return nil }
func (s relaySession) Data(rd io.Reader) error {
	b, err := io.ReadAll(rd)
	s.r.mu.Lock()
	s.r.msgs = append(s.r.msgs, b)
	s.r.mu.Unlock()
	return err
}

// Mail that cannot be delivered is not lost: with the relay down the scan
// exits 1 with the transitions pending; once it is up the next scan sends
// the site's transitions as one message, each id once, and a third scan
// sends nothing more.
func TestMailDeliveredOnceAfterOutage(t *testing.T) {
	dir := demoPlant(t, "20")
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	port := ln.Addr().(*net.TCPAddr).Port
	ln.Close() // down for the first scan
	y, err := os.ReadFile(filepath.Join(dir, "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	cfg := filepath.Join(dir, "mail.yaml")
	m := "\noutputs:\n  delivery:\n    retry_min: 0 s\n  alert:\n    mail:\n      host: 127.0.0.1\n      port: " + strconv.Itoa(port) +
		"\n      tls: none\n      from: drainsight <alerts@kestrel.invalid>\n      to: [oncall@kestrel.invalid]\n"
	if err := os.WriteFile(cfg, []byte(strings.Replace(string(y), "\noutputs:\n", m, 1)), 0o600); err != nil {
		t.Fatal(err)
	}
	state := filepath.Join(t.TempDir(), "s.db")
	scanIt := func() error {
		_, _, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", state, "--out", t.TempDir(), "--now", "2026-01-17T12:00:00Z")
		return err
	}
	if err := scanIt(); exitCode(err) != 1 || !strings.Contains(err.Error(), "notifications pending") {
		t.Fatalf("scan with the relay down: %v, want exit 1 with notifications pending", err)
	}
	st, err := openStore(state, false)
	if err != nil {
		t.Fatal(err)
	}
	queued, _ := st.Pending("notify:mail:kestrel-vale")
	st.Close()
	if len(queued) == 0 {
		t.Fatal("nothing queued for the site's mail")
	}
	r := &relay{}
	srv := smtp.NewServer(r)
	srv.Domain = "localhost"
	srv.ReadTimeout, srv.WriteTimeout = 10*time.Second, 10*time.Second
	ln, err = net.Listen("tcp", "127.0.0.1:"+strconv.Itoa(port))
	if err != nil {
		t.Skipf("the relay's port was taken meanwhile: %v", err)
	}
	go srv.Serve(ln)
	defer srv.Close()
	if err := scanIt(); err != nil {
		t.Fatalf("scan with the relay up: %v", err)
	}
	if err := scanIt(); err != nil {
		t.Fatalf("third scan: %v", err)
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	if len(r.msgs) != 1 {
		t.Fatalf("%d messages, want one for the site's %d transitions", len(r.msgs), len(queued))
	}
	msg, err := mail.ReadMessage(bytes.NewReader(r.msgs[0]))
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(msg.Body)
	text := strings.ReplaceAll(string(body), "=\r\n", "")
	for _, it := range queued {
		id := strings.TrimPrefix(it.ID, "notify:mail:kestrel-vale|")
		if n := strings.Count(text, "id "+id); n < 1 {
			t.Errorf("transition %s not in the message", id)
		}
	}
	t.Logf("%d transitions in one message after the outage: %s", len(queued), msg.Header.Get("Subject"))
}
