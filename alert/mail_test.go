package alert

import (
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"errors"
	"io"
	"math/big"
	"mime"
	"mime/multipart"
	"net"
	"net/mail"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/emersion/go-sasl"
	"github.com/emersion/go-smtp"

	"drainsight/detect"
)

// smtpServer is a real SMTP server (go-smtp) run in the test: STARTTLS
// with a certificate made here, AUTH PLAIN against one user, and the
// messages it accepts kept in memory.
type smtpServer struct {
	mu       sync.Mutex
	msgs     [][]byte
	rcpts    [][]string
	user, pw string
	addr     string
	port     int
	pool     *x509.CertPool
}

type smtpSession struct {
	s     *smtpServer
	authd bool
	to    []string
}

func (s *smtpServer) NewSession(*smtp.Conn) (smtp.Session, error) { return &smtpSession{s: s}, nil }
func (x *smtpSession) AuthMechanisms() []string                   { return []string{sasl.Plain} }
func (x *smtpSession) Auth(string) (sasl.Server, error) {
	return sasl.NewPlainServer(func(_, user, pw string) error {
		if user != x.s.user || pw != x.s.pw {
			return errors.New("invalid credentials")
		}
		x.authd = true
		return nil
	}), nil
}
func (x *smtpSession) Mail(string, *smtp.MailOptions) error {
	if x.s.user != "" && !x.authd {
		return &smtp.SMTPError{Code: 530, Message: "authentication required"}
	}
	return nil
}
func (x *smtpSession) Rcpt(to string, _ *smtp.RcptOptions) error { x.to = append(x.to, to); return nil }
func (x *smtpSession) Data(r io.Reader) error {
	b, err := io.ReadAll(r)
	if err != nil {
		return err
	}
	x.s.mu.Lock()
	x.s.msgs, x.s.rcpts = append(x.s.msgs, b), append(x.s.rcpts, x.to)
	x.s.mu.Unlock()
	return nil
}
func (x *smtpSession) Reset()        { x.to = nil }
func (x *smtpSession) Logout() error { return nil }

// startSMTP runs the server on a loopback port, with STARTTLS when
// withTLS.
func startSMTP(t *testing.T, withTLS bool) *smtpServer {
	t.Helper()
	s := &smtpServer{user: "alerts", pw: "s3cret-pw"}
	srv := smtp.NewServer(s)
	srv.Domain = "localhost"
	srv.ReadTimeout, srv.WriteTimeout = 10*time.Second, 10*time.Second
	if withTLS {
		key, _ := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
		tmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "127.0.0.1"},
			IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}, NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
			KeyUsage: x509.KeyUsageDigitalSignature | x509.KeyUsageCertSign, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
			IsCA: true, BasicConstraintsValid: true}
		der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
		if err != nil {
			t.Fatal(err)
		}
		cert, _ := x509.ParseCertificate(der)
		s.pool = x509.NewCertPool()
		s.pool.AddCert(cert)
		srv.TLSConfig = &tls.Config{Certificates: []tls.Certificate{{Certificate: [][]byte{der}, PrivateKey: key}}}
	} else {
		s.user = "" // a relay without TLS takes mail without AUTH
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	go srv.Serve(ln)
	t.Cleanup(func() { srv.Close() })
	s.addr = "127.0.0.1"
	s.port = ln.Addr().(*net.TCPAddr).Port
	return s
}

func mailEvents() []Event {
	at := time.Date(2031, 3, 4, 6, 0, 0, 0, time.UTC)
	return []Event{
		{Status: StatusNew, At: at, Finding: detect.Finding{Tank: "SUMP-1", Kind: detect.KindRestriction, Subtype: detect.SubAbrupt, MagnitudePct: -35, Evidence: "K fell 35.0 % from baseline"}},
		{Status: StatusCleared, At: at, Finding: detect.Finding{Tank: "WASH-2", Kind: detect.KindTankLeak, Evidence: "level falls while shut"}},
		{Status: StatusNew, At: at, Finding: detect.Finding{Tank: "OTHER-9", Kind: detect.KindRestriction, Evidence: "another site"}},
	}
}

// One message per site and round: the in-process server receives the two
// transitions of the north site over STARTTLS with AUTH PLAIN (the other
// site's transition is not in it), and the test reads back the subject,
// the plain-text and HTML parts, the transitions' ids and the caution.
func TestMailNotifierSendsOneMessagePerSite(t *testing.T) {
	s := startSMTP(t, true)
	n := MailNotifier{Host: s.addr, Port: s.port, RootCAs: s.pool, Username: s.user, Password: s.pw,
		From: "drainsight <alerts@north.invalid>", To: []string{"oncall@north.invalid"}, Site: "north", SiteName: "North works",
		Tanks: map[string]string{"SUMP-1": "north", "WASH-2": "north", "OTHER-9": "south"}, Descriptions: map[string]string{"SUMP-1": "drainage sump"}}
	evs := mailEvents()
	if err := n.Notify(context.Background(), evs); err != nil {
		t.Fatal(err)
	}
	if len(s.msgs) != 1 || len(s.rcpts[0]) != 1 || s.rcpts[0][0] != "oncall@north.invalid" {
		t.Fatalf("%d messages to %v, want one to the on-call address", len(s.msgs), s.rcpts)
	}
	msg, err := mail.ReadMessage(bytes.NewReader(s.msgs[0]))
	if err != nil {
		t.Fatal(err)
	}
	subj, _ := new(mime.WordDecoder).DecodeHeader(msg.Header.Get("Subject"))
	if subj != "drainsight: 1 new, 1 cleared at North works" {
		t.Errorf("subject %q", subj)
	}
	parts := map[string]string{}
	collectParts(t, msg.Header.Get("Content-Type"), msg.Body, parts)
	text, html := parts["text/plain"], parts["text/html"]
	for _, want := range []string{"NEW: SUMP-1, restriction (abrupt) (drainage sump)", "CLEARED: WASH-2, tank leak", "id " + evs[0].ID(), "id " + evs[1].ID(), "Caution"} {
		if !strings.Contains(text, want) {
			t.Errorf("text part lacks %q:\n%s", want, text)
		}
	}
	if !strings.Contains(html, "<td><b>new</b></td>") || !strings.Contains(html, evs[1].ID()) || strings.Contains(text+html, "OTHER-9") {
		t.Errorf("html part:\n%s", html)
	}
	// nothing of this site: nothing is sent
	if err := n.Notify(context.Background(), evs[2:]); err != nil || len(s.msgs) != 1 {
		t.Errorf("events of another site only: %v, %d messages", err, len(s.msgs))
	}
}

// collectParts walks a MIME tree and keeps each leaf part by its type.
func collectParts(t *testing.T, ct string, body io.Reader, out map[string]string) {
	t.Helper()
	mt, params, err := mime.ParseMediaType(ct)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(mt, "multipart/") {
		b, _ := io.ReadAll(body)
		out[mt] = decodeQP(string(b))
		return
	}
	r := multipart.NewReader(body, params["boundary"])
	for {
		p, err := r.NextPart()
		if err == io.EOF {
			return
		}
		if err != nil {
			t.Fatal(err)
		}
		collectParts(t, p.Header.Get("Content-Type"), p, out)
	}
}

// decodeQP undoes quoted-printable soft line breaks and escapes (the
// multipart reader decodes quoted-printable itself; this keeps the check
// independent of that).
func decodeQP(s string) string { return strings.ReplaceAll(s, "=\r\n", "") }

// Failures are errors that name the setting to check and never the
// password, and nothing counts as sent: a wrong password, a server
// without STARTTLS when it is required, and no server at all.
func TestMailNotifierFailures(t *testing.T) {
	evs := mailEvents()[:1]
	s := startSMTP(t, true)
	bad := MailNotifier{Host: s.addr, Port: s.port, RootCAs: s.pool, Username: s.user, Password: "wrong-password-xyz",
		From: "a@north.invalid", To: []string{"b@north.invalid"}}
	err := bad.Notify(context.Background(), evs)
	if err == nil || !strings.Contains(err.Error(), "password_env or password_file") || strings.Contains(err.Error(), "wrong-password-xyz") {
		t.Errorf("wrong password: %v", err)
	}
	plain := startSMTP(t, false)
	req := MailNotifier{Host: plain.addr, Port: plain.port, From: "a@north.invalid", To: []string{"b@north.invalid"}}
	if err := req.Notify(context.Background(), evs); err == nil || !strings.Contains(err.Error(), "outputs.alert.mail.tls") {
		t.Errorf("STARTTLS required, server without it: %v", err)
	}
	if len(s.msgs)+len(plain.msgs) != 0 {
		t.Errorf("%d messages accepted by failing deliveries", len(s.msgs)+len(plain.msgs))
	}
	ln, _ := net.Listen("tcp", "127.0.0.1:0")
	port := ln.Addr().(*net.TCPAddr).Port
	ln.Close()
	none := MailNotifier{Host: "127.0.0.1", Port: port, TLS: MailNoTLS, From: "a@north.invalid", To: []string{"b@north.invalid"}, Timeout: 2 * time.Second}
	if err := none.Notify(context.Background(), evs); err == nil || !strings.Contains(err.Error(), "outputs.alert.mail") {
		t.Errorf("no server: %v", err)
	}
	// and with no TLS asked for, the plain server takes it
	req.TLS = MailNoTLS
	if err := req.Notify(context.Background(), evs); err != nil || len(plain.msgs) != 1 {
		t.Errorf("plain relay: %v, %d messages", err, len(plain.msgs))
	}
}
