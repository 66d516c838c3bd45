package main

import (
	"context"
	"crypto/x509"
	"fmt"
	"log/slog"
	"maps"
	"os"
	"slices"
	"strings"
	"time"

	"drainsight/alert"
	"drainsight/config"
	"drainsight/scan"
	"drainsight/store"
)

// notifiers returns the configured notifiers by outbox sink name. Each is
// its own sink: a webhook that is down holds back neither the log nor the
// command.
func notifiers(cfg *config.Config, log *slog.Logger) map[string]alert.Notifier {
	a := cfg.Outputs.Alert
	ns := map[string]alert.Notifier{}
	if a.Log {
		ns["notify:log"] = alert.LogNotifier{Logger: log}
	}
	switch {
	case a.WebhookURLEnv != "":
		ns["notify:webhook"] = webhookFromEnv{env: a.WebhookURLEnv, settings: a}
	case a.WebhookURL != "":
		ns["notify:webhook"] = webhookFromEnv{url: a.WebhookURL, settings: a}
	}
	if len(a.Command) > 0 {
		ns["notify:command"] = alert.CommandNotifier{Argv: a.Command}
	}
	if m := a.Mail; m != nil {
		addMail(ns, cfg, m, log)
	}
	return ns
}

// addMail adds one mail notifier per site (sink notify:mail:<site>; one
// for the whole plant when no sites are configured), each telling only
// its site's tanks to the site's mail_to (or outputs.alert.mail.to).
func addMail(ns map[string]alert.Notifier, cfg *config.Config, m *config.MailSettings, log *slog.Logger) {
	tanks := map[string]string{}
	desc := map[string]string{}
	for _, t := range cfg.Tanks {
		tanks[t.ID], desc[t.ID] = t.Site, t.Description
	}
	sites := cfg.Sites
	if len(sites) == 0 {
		sites = []config.Site{{}}
	}
	for _, s := range sites {
		to := s.MailTo
		if len(to) == 0 {
			to = m.To
		}
		if len(to) == 0 {
			log.Warn("no mail recipients for the site: set sites[].mail_to or outputs.alert.mail.to", "site", s.ID)
			continue
		}
		name := s.Description
		if name == "" {
			name = s.ID
		}
		sink := "notify:mail"
		if s.ID != "" {
			sink += ":" + s.ID
		}
		ns[sink] = mailAtDelivery{settings: m, n: alert.MailNotifier{Host: m.Host, Port: m.Port, TLS: alert.MailTLS(m.TLS),
			Username: m.Username, From: m.From, To: to, Site: s.ID, SiteName: name, Tanks: tanks, Descriptions: desc}}
	}
}

// mailAtDelivery reads the password and the CA file at each delivery: an
// unset variable or an unreadable file fails the delivery (the
// transitions stay queued) with a message naming the setting.
type mailAtDelivery struct {
	settings *config.MailSettings
	n        alert.MailNotifier
}

func (m mailAtDelivery) Notify(ctx context.Context, evs []alert.Event) error {
	n := m.n
	var err error
	if n.Password, err = m.settings.Password(); err != nil {
		return fmt.Errorf("alert: mail not sent: %w", err)
	}
	if f := m.settings.CAFile; f != "" {
		pem, err := os.ReadFile(f)
		if err != nil {
			return fmt.Errorf("alert: mail not sent: outputs.alert.mail.ca_file: %w", err)
		}
		n.RootCAs = x509.NewCertPool()
		if !n.RootCAs.AppendCertsFromPEM(pem) {
			return fmt.Errorf("alert: mail not sent: outputs.alert.mail.ca_file %s holds no PEM certificate", f)
		}
	}
	return n.Notify(ctx, evs)
}

// grouped reports whether a notifier tells a round's transitions in one
// message (mail).
func grouped(n alert.Notifier) bool {
	_, ok := n.(mailAtDelivery)
	return ok
}

// webhookFromEnv reads the webhook's URL (from its environment variable,
// when it is given so) and its signing secret at each delivery: an unset
// variable or an unreadable secret fails the delivery (the transition stays
// queued) with a message naming the setting, never the URL or the secret.
type webhookFromEnv struct {
	env, url string
	settings config.AlertSettings
}

func (w webhookFromEnv) Notify(ctx context.Context, evs []alert.Event) error {
	url := w.url
	if w.env != "" {
		if url = os.Getenv(w.env); url == "" {
			return fmt.Errorf("alert: webhook not sent: environment variable %s (setting outputs.alert.webhook_url_env) is empty or unset", w.env)
		}
	}
	secret, err := w.settings.Secret()
	if err != nil {
		return fmt.Errorf("alert: webhook not sent: %w", err)
	}
	return alert.WebhookNotifier{URL: url, Secret: secret}.Notify(ctx, evs)
}

// notifyPlan is where this pass's transitions are queued: the notifiers
// and the findings file.
func (j *job) notifyPlan(now time.Time, pass int64) scan.Notify {
	wb := map[string]string{}
	for _, p := range j.plans {
		if s := writeBackSink(&p.cfg); s != "" {
			wb[p.cfg.ID] = s // its transitions go to its site's InfluxDB too
		}
	}
	return scan.Notify{Sinks: slices.Sorted(maps.Keys(j.notifiers)), FileSink: scan.SinkFindings, Pass: pass, Now: now, WriteBack: wb}
}

// sender drains the outbox with the configured backoff and expiry.
func (j *job) sender() *scan.Sender {
	d := j.cfg.Outputs.Delivery
	return &scan.Sender{Store: j.st, Log: j.log, MaxAge: d.ExpireAfter, Backoff: scan.Backoff(d.RetryMin, d.RetryMax)}
}

// deliverNotifications sends the queued transitions (this pass's and any
// left by earlier ones) to every notifier, and returns what is sent and
// still pending.
func (j *job) deliverNotifications(ctx context.Context) scan.Delivery {
	var total scan.Delivery
	snd := j.sender()
	// Transitions queued for a notifier the config no longer has are
	// dropped with a log line: nothing would ever deliver them.
	if all, err := j.st.Pending(""); err == nil {
		var orphans []store.OutboxItem
		for _, it := range all {
			if strings.HasPrefix(it.Sink, "notify:") && j.notifiers[it.Sink] == nil {
				orphans = append(orphans, it)
			}
		}
		if len(orphans) > 0 {
			j.log.Warn("dropping transitions queued for a notifier no longer configured", "count", len(orphans), "first", orphans[0].ID)
			if err := j.st.Delivered(orphans...); err != nil {
				j.log.Error("notification outbox", "err", err)
			}
		}
	}
	for _, name := range slices.Sorted(maps.Keys(j.notifiers)) {
		to := scan.NotifyTo(j.notifiers[name])
		if grouped(j.notifiers[name]) {
			to = scan.NotifyGroupedTo(j.notifiers[name])
		}
		d, err := snd.Deliver(ctx, name, to, time.Now())
		if err != nil {
			j.log.Error("notification outbox", "notifier", name, "err", err)
		}
		if d.LastError != "" {
			d.LastError = name + ": " + d.LastError
		}
		total.Add(d)
	}
	return total
}

// errNotificationsPending is the pass's error while transitions wait in
// the outbox: the scan did its work, but on-call staff have not been told.
type errNotificationsPending struct{ d scan.Delivery }

func (e errNotificationsPending) Error() string {
	msg := fmt.Sprintf("%d notifications pending in the state file (retried on the next passes)", e.d.Pending)
	if e.d.LastError != "" {
		msg += "; last failure: " + e.d.LastError
	}
	return msg
}
