package alert

import (
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"io"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"testing"
	"time"

	"drainsight/detect"
)

// The HMAC-SHA256 primitive against the published vector of RFC 4231
// §4.3 (test case 2: key "Jefe", data "what do ya want for nothing?"),
// then Sign against the primitive over timestamp, ".", body.
func TestSignMatchesRFC4231(t *testing.T) {
	m := hmac.New(sha256.New, []byte("Jefe"))
	m.Write([]byte("what do ya want for nothing?"))
	if got := hex.EncodeToString(m.Sum(nil)); got != "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843" {
		t.Fatalf("HMAC-SHA256 test case 2: %s", got)
	}
	m = hmac.New(sha256.New, []byte("Jefe"))
	m.Write([]byte("1900000000.{\"a\":1}"))
	if want := "sha256=" + hex.EncodeToString(m.Sum(nil)); Sign("Jefe", "1900000000", []byte(`{"a":1}`)) != want {
		t.Errorf("Sign is not HMAC-SHA256 over timestamp, '.', body")
	}
}

// A receiver that follows the README's procedure accepts the signed
// request; a changed body, a wrong secret and a replay an hour later are
// refused.
func TestWebhookSignedRequest(t *testing.T) {
	var ts, sig string
	var body []byte
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		ts, sig = r.Header.Get(HeaderTimestamp), r.Header.Get(HeaderSignature)
		body, _ = io.ReadAll(r.Body)
	}))
	defer srv.Close()
	at := time.Date(2031, 3, 4, 5, 6, 7, 0, time.UTC)
	n := WebhookNotifier{URL: srv.URL, Secret: "s3cret-for-the-test", now: func() time.Time { return at }}
	ev := Event{Status: StatusNew, At: at, Finding: detect.Finding{Tank: "B2", Kind: detect.KindRestriction, Subtype: "abrupt"}}
	if err := n.Notify(context.Background(), []Event{ev}); err != nil {
		t.Fatal(err)
	}
	if ts != strconv.FormatInt(at.Unix(), 10) || !strings.HasPrefix(sig, "sha256=") || len(sig) != 7+64 {
		t.Fatalf("headers %q %q", ts, sig)
	}
	if err := Verify("s3cret-for-the-test", ts, sig, body, at.Add(time.Minute), 5*time.Minute); err != nil {
		t.Errorf("the genuine request: %v", err)
	}
	changed := []byte(strings.Replace(string(body), "B2", "B3", 1))
	for name, err := range map[string]error{
		"changed body":     Verify("s3cret-for-the-test", ts, sig, changed, at, 5*time.Minute),
		"wrong secret":     Verify("another", ts, sig, body, at, 5*time.Minute),
		"replay 1 h later": Verify("s3cret-for-the-test", ts, sig, body, at.Add(time.Hour), 5*time.Minute),
	} {
		if err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
	if !strings.Contains(string(body), `"id":"B2|restriction|new|2031-03-04T05:06:07Z"`) {
		t.Errorf("body has no de-duplication id: %s", body)
	}
}
