package alert

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"html/template"
	"math"
	"net"
	"sort"
	"strings"
	"time"

	"github.com/wneessen/go-mail"
)

// MailTLS is how a MailNotifier protects its SMTP connection.
type MailTLS string

// The TLS policies: STARTTLS required (the default), STARTTLS when the
// server offers it, implicit TLS from the first byte (port 465), or none
// (a relay on this machine).
const (
	MailSTARTTLS      MailTLS = "starttls"
	MailOpportunistic MailTLS = "opportunistic"
	MailImplicit      MailTLS = "implicit"
	MailNoTLS         MailTLS = "none"
)

// MailNotifier sends the transitions of one site as one message per
// delivery round (a plain-text and an HTML part) to its recipients. The
// password comes from the caller (an environment variable or a file named
// in the config) and never appears in an error or a log line.
type MailNotifier struct {
	Host     string
	Port     int
	TLS      MailTLS
	RootCAs  *x509.CertPool // nil: the system's
	Username string         // "": no authentication
	Password string
	From     string
	To       []string
	// Site is the site whose tanks this notifier tells about ("" for
	// every tank); SiteName is how the subject names it. Tanks maps a
	// tank to its site, for the filter; Descriptions to its description.
	Site, SiteName string
	Tanks          map[string]string
	Descriptions   map[string]string
	Timeout        time.Duration // default 20 s
}

// Notify implements Notifier: the events of the notifier's site (none:
// nothing is sent) in one message.
func (n MailNotifier) Notify(ctx context.Context, evs []Event) error {
	var mine []Event
	for _, e := range evs {
		if n.Site == "" || n.Tanks[e.Finding.Tank] == n.Site {
			mine = append(mine, e)
		}
	}
	if len(mine) == 0 {
		return nil
	}
	m, err := n.Message(mine)
	if err != nil {
		return err
	}
	opts := []mail.Option{mail.WithPort(n.Port), mail.WithTimeout(n.timeout()), mail.WithoutNoop()}
	tc := &tls.Config{ServerName: n.Host, RootCAs: n.RootCAs, MinVersion: tls.VersionTLS12}
	switch n.TLS {
	case MailNoTLS:
		opts = append(opts, mail.WithTLSPolicy(mail.NoTLS))
	case MailOpportunistic:
		opts = append(opts, mail.WithTLSPolicy(mail.TLSOpportunistic), mail.WithTLSConfig(tc))
	case MailImplicit:
		opts = append(opts, mail.WithSSL(), mail.WithTLSConfig(tc))
	default:
		opts = append(opts, mail.WithTLSPolicy(mail.TLSMandatory), mail.WithTLSConfig(tc))
	}
	if n.Username != "" {
		opts = append(opts, mail.WithSMTPAuth(mail.SMTPAuthPlain), mail.WithUsername(n.Username), mail.WithPassword(n.Password))
	}
	c, err := mail.NewClient(n.Host, opts...)
	if err != nil {
		return n.fail(err)
	}
	if err := c.DialAndSendWithContext(ctx, m); err != nil {
		return n.fail(err)
	}
	return nil
}

func (n MailNotifier) timeout() time.Duration {
	if n.Timeout > 0 {
		return n.Timeout
	}
	return 20 * time.Second
}

// fail names the server and the setting to check, never the password.
func (n MailNotifier) fail(err error) error {
	msg := err.Error()
	if n.Password != "" {
		msg = strings.ReplaceAll(msg, n.Password, "***")
	}
	hint := "outputs.alert.mail"
	var se *mail.SendError
	low := strings.ToLower(msg)
	switch {
	case strings.Contains(low, "auth"):
		hint = "outputs.alert.mail.username and password_env or password_file"
	case strings.Contains(low, "tls"), strings.Contains(low, "certificate"):
		hint = "outputs.alert.mail.tls and ca_file"
	case errors.As(err, &se) && se.IsTemp():
		hint += " (a temporary refusal: retried)"
	}
	var ne net.Error
	if errors.As(err, &ne) {
		hint = "outputs.alert.mail.host and port"
	}
	return fmt.Errorf("alert: mail via %s:%d: %s (check %s)", n.Host, n.Port, msg, hint)
}

// Message builds the message of evs (exported for tests and previews).
func (n MailNotifier) Message(evs []Event) (*mail.Msg, error) {
	m := mail.NewMsg(mail.WithNoDefaultUserAgent())
	if err := m.From(n.From); err != nil {
		return nil, fmt.Errorf("alert: mail: outputs.alert.mail.from %q: %w", n.From, err)
	}
	if err := m.To(n.To...); err != nil {
		return nil, fmt.Errorf("alert: mail: recipients %q: %w", n.To, err)
	}
	m.Subject(mailSubject(n.SiteName, evs))
	m.SetDate()
	m.SetMessageID()
	rows := mailRows(evs, n.Descriptions)
	m.SetBodyString(mail.TypeTextPlain, mailText(n.SiteName, rows))
	var html strings.Builder
	if err := mailPage.Execute(&html, struct {
		Site    string
		Rows    []mailRow
		Caution string
	}{n.SiteName, rows, Caution}); err != nil {
		return nil, err
	}
	m.AddAlternativeString(mail.TypeTextHTML, html.String())
	return m, nil
}

// mailSubject says how many findings opened and cleared, and where.
func mailSubject(site string, evs []Event) string {
	var opened, cleared int
	for _, e := range evs {
		if e.Status == StatusCleared {
			cleared++
		} else {
			opened++
		}
	}
	var parts []string
	if opened > 0 {
		parts = append(parts, fmt.Sprintf("%d new", opened))
	}
	if cleared > 0 {
		parts = append(parts, fmt.Sprintf("%d cleared", cleared))
	}
	s := "drainsight: " + strings.Join(parts, ", ")
	if site != "" {
		s += " at " + site
	}
	return s
}

type mailRow struct {
	ID, Status, Tank, Description, Finding, At, Change, Evidence string
}

func mailRows(evs []Event, desc map[string]string) []mailRow {
	sorted := append([]Event(nil), evs...)
	sort.SliceStable(sorted, func(i, j int) bool {
		if sorted[i].Status != sorted[j].Status {
			return sorted[i].Status == StatusNew // new first, then cleared
		}
		return sorted[i].Finding.Tank < sorted[j].Finding.Tank
	})
	rows := make([]mailRow, 0, len(sorted))
	for _, e := range sorted {
		f := e.Finding
		kind := strings.ReplaceAll(f.Kind, "_", " ")
		if f.Subtype != "" {
			kind += " (" + strings.ReplaceAll(f.Subtype, "_", " ") + ")"
		}
		change := ""
		if !math.IsNaN(f.MagnitudePct) && f.MagnitudePct != 0 {
			change = fmt.Sprintf("%+.1f %%", f.MagnitudePct)
		}
		rows = append(rows, mailRow{ID: e.ID(), Status: string(e.Status), Tank: f.Tank, Description: desc[f.Tank],
			Finding: kind, At: e.At.UTC().Format("2006-01-02 15:04 UTC"), Change: change, Evidence: f.Evidence})
	}
	return rows
}

func mailText(site string, rows []mailRow) string {
	var b strings.Builder
	fmt.Fprintf(&b, "drainsight outlet findings")
	if site != "" {
		fmt.Fprintf(&b, " at %s", site)
	}
	b.WriteString("\n\n")
	for _, r := range rows {
		fmt.Fprintf(&b, "%s: %s, %s", strings.ToUpper(r.Status), r.Tank, r.Finding)
		if r.Description != "" {
			fmt.Fprintf(&b, " (%s)", r.Description)
		}
		fmt.Fprintf(&b, " at %s", r.At)
		if r.Change != "" {
			fmt.Fprintf(&b, ", change %s", r.Change)
		}
		fmt.Fprintf(&b, "\n  %s\n  id %s\n\n", r.Evidence, r.ID)
	}
	b.WriteString(Caution + "\n")
	return b.String()
}

var mailPage = template.Must(template.New("mail").Parse(`<!doctype html>
<html><body style="font:14px/1.4 sans-serif;color:#222">
<p><b>drainsight outlet findings{{if .Site}} at {{.Site}}{{end}}</b></p>
<table style="border-collapse:collapse" cellpadding="4">
<tr><th align="left">status</th><th align="left">tank</th><th align="left">finding</th><th align="left">at</th><th align="left">change</th><th align="left">evidence</th></tr>
{{range .Rows}}<tr style="border-top:1px solid #ddd"><td><b>{{.Status}}</b></td><td style="white-space:nowrap">{{.Tank}}{{if .Description}}<br><small>{{.Description}}</small>{{end}}</td><td>{{.Finding}}</td><td style="white-space:nowrap">{{.At}}</td><td>{{.Change}}</td><td>{{.Evidence}}<br><small>id {{.ID}}</small></td></tr>
{{end}}</table>
<p style="border-left:4px solid #c60;padding:.4em .8em">{{.Caution}}</p>
</body></html>
`))
