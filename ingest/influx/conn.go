package influx

import (
	"bytes"
	"compress/gzip"
	"context"
	"crypto/tls"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"net"
	"net/http"
	"net/url"
	"path"
	"time"

	influxdb2 "github.com/influxdata/influxdb-client-go/v2"
	"github.com/influxdata/influxdb-client-go/v2/api"
	ihttp "github.com/influxdata/influxdb-client-go/v2/api/http"
)

// Conn says where the data lives. The caller fills it from its configuration
// (typically the token from an environment variable or a file).
//
// For InfluxDB 2.x: Token is an API token, Org the organisation name or id,
// Bucket the bucket name. For 1.8 (Flux enabled): Token is "user:password",
// or "" when authentication is off; Bucket is "db/rp" or "db" for the default
// retention policy; Org is ignored and may be empty.
type Conn struct {
	URL    string
	Org    string
	Bucket string
	Token  string
}

// String describes the connection with the token (and any password in the
// URL) redacted, for logs and error messages.
func (c Conn) String() string {
	tok := "none"
	if c.Token != "" {
		tok = "set (redacted)"
	}
	return fmt.Sprintf("influx url=%s org=%q bucket=%q token=%s", redactURL(c.URL), c.Org, c.Bucket, tok)
}

// GoString keeps %#v from printing the token.
func (c Conn) GoString() string { return "influx.Conn{" + c.String() + "}" }

func redactURL(s string) string {
	u, err := url.Parse(s)
	if err != nil {
		return "(unparsable url)"
	}
	return u.Redacted()
}

// Validate checks the fields that can be checked without a server.
func (c Conn) Validate() error {
	u, err := url.Parse(c.URL)
	if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		return fmt.Errorf("influx: url %q: want http://host:port or https://host:port", redactURL(c.URL))
	}
	if c.Bucket == "" {
		return errors.New("influx: bucket is empty (2.x: bucket name; 1.8: \"db/rp\" or \"db\")")
	}
	return nil
}

// Retry is the backoff policy for queries and write batches. The zero value
// means the defaults below.
//
// Attempt i (i = 1, 2, ...) that failed transiently is followed by a wait of
// d_i = min(Max, Initial * 2^(i-1)) scaled by a uniform factor in [0.5, 1)
// ("equal jitter"), or by the server's Retry-After when that is longer, until
// Attempts attempts were made.
type Retry struct {
	Attempts int           // total attempts including the first; default 5
	Initial  time.Duration // first wait; default 1 s
	Max      time.Duration // cap of one wait; default 30 s

	// sleep and jitter are replaced in tests.
	sleep  func(ctx context.Context, d time.Duration) error
	jitter func() float64
}

func (r Retry) withDefaults() Retry {
	if r.Attempts <= 0 {
		r.Attempts = 5
	}
	if r.Initial <= 0 {
		r.Initial = time.Second
	}
	if r.Max <= 0 {
		r.Max = 30 * time.Second
	}
	if r.sleep == nil {
		r.sleep = sleepCtx
	}
	if r.jitter == nil {
		r.jitter = rand.Float64
	}
	return r
}

// wait returns the pause after failed attempt i (1-based).
func (r Retry) wait(i int, retryAfter time.Duration) time.Duration {
	d := r.Initial
	for k := 1; k < i && d < r.Max; k++ {
		d *= 2
	}
	d = min(d, r.Max)
	d = time.Duration(float64(d) * (0.5 + 0.5*r.jitter()))
	return max(d, retryAfter)
}

func sleepCtx(ctx context.Context, d time.Duration) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-ctx.Done():
		return ctx.Err()
	case <-t.C:
		return nil
	}
}

// Options tune a Client. The zero value means the documented defaults.
type Options struct {
	QueryTimeout time.Duration // bound of one query attempt, stream included; default 2 min
	WriteTimeout time.Duration // bound of one write batch attempt; default 30 s
	BatchSize    int           // points per write request; default and maximum 5000
	Retry        Retry
	TLS          *tls.Config // nil: system roots
	AppName      string      // User-Agent; default "drainsight"

	// QueryGzip asks the server to gzip query results. It saves bandwidth
	// (annotated CSV shrinks about tenfold) at the cost of CPU on both ends;
	// leave it off on a LAN, where decompressing costs more than the bytes.
	QueryGzip bool
	// Language is the query language: LanguageFlux (the default) over
	// /api/v2/query, or LanguageInfluxQL over the v1 /query endpoint, for
	// servers without Flux (InfluxDB 3) or where it is turned off.
	Language string
}

func (o Options) withDefaults() Options {
	if o.QueryTimeout <= 0 {
		o.QueryTimeout = 2 * time.Minute
	}
	if o.WriteTimeout <= 0 {
		o.WriteTimeout = 30 * time.Second
	}
	if o.BatchSize <= 0 || o.BatchSize > 5000 {
		o.BatchSize = 5000
	}
	if o.AppName == "" {
		o.AppName = "drainsight"
	}
	if o.Language == "" {
		o.Language = LanguageFlux
	}
	o.Retry = o.Retry.withDefaults()
	return o
}

// Client is a connection to one InfluxDB server. It is safe for concurrent
// use; make one per server and Close it at shutdown.
type Client struct {
	conn      Conn
	opt       Options
	transport *http.Transport
	ic        influxdb2.Client
	queryURL  string
	write     api.WriteAPIBlocking
}

// New checks conn and builds a client; it does not contact the server (see
// Check).
func New(conn Conn, opt Options) (*Client, error) {
	if err := conn.Validate(); err != nil {
		return nil, err
	}
	opt = opt.withDefaults()
	if opt.Language != LanguageFlux && opt.Language != LanguageInfluxQL {
		return nil, fmt.Errorf("influx: query language %q: want %q or %q", opt.Language, LanguageFlux, LanguageInfluxQL)
	}
	tr := &http.Transport{
		Proxy:                 http.ProxyFromEnvironment,
		DialContext:           (&net.Dialer{Timeout: 10 * time.Second, KeepAlive: 30 * time.Second}).DialContext,
		TLSHandshakeTimeout:   10 * time.Second,
		TLSClientConfig:       opt.TLS,
		MaxIdleConns:          16,
		MaxIdleConnsPerHost:   16,
		IdleConnTimeout:       90 * time.Second,
		ExpectContinueTimeout: time.Second,
	}
	// No http.Client.Timeout: it would cut off long result streams. Every
	// call is bounded by a context deadline instead.
	hc := &http.Client{Transport: tr}
	iopt := influxdb2.DefaultOptions().
		SetHTTPClient(hc).
		SetApplicationName(opt.AppName).
		SetBatchSize(uint(opt.BatchSize))
	ic := influxdb2.NewClientWithOptions(conn.URL, conn.Token, iopt)
	return &Client{
		conn:      conn,
		opt:       opt,
		transport: tr,
		ic:        ic,
		queryURL:  queryURL(ic.HTTPService().ServerAPIURL(), conn.Org),
		write:     ic.WriteAPIBlocking(conn.Org, conn.Bucket),
	}, nil
}

// Conn returns the connection settings (print it with %v: the token is
// redacted).
func (c *Client) Conn() Conn { return c.conn }

// Close releases idle connections. Calls in flight are not interrupted.
func (c *Client) Close() {
	c.ic.Close()
	c.transport.CloseIdleConnections()
}

// Check runs a tiny real query against the bucket. A ping is not enough: on
// 1.8 /ping and /health succeed with a wrong password. The error is a
// *ConfigError naming the setting when the server rejects the token, org or
// bucket, and wraps ErrUnavailable when the server cannot be reached.
func (c *Client) Check(ctx context.Context) error {
	flux := "from(bucket: " + fluxString(c.conn.Bucket) + ")\n  |> range(start: -1m)\n  |> limit(n: 1)\n"
	err := c.retry(ctx, "check", c.opt.QueryTimeout, func(ctx context.Context) error {
		body, err := c.openQuery(ctx, flux)
		if err != nil {
			return err
		}
		defer body.Close()
		rows := newCSVRows(body, "_measurement")
		for {
			_, _, _, ok, err := rows.next()
			if err != nil || !ok {
				return err
			}
		}
	})
	return err
}

// queryURL is the query endpoint as the client library builds it:
// <url>/api/v2/query?org=<org>.
func queryURL(apiURL, org string) string {
	u, err := url.Parse(apiURL)
	if err != nil { // New validated the URL
		panic(fmt.Sprintf("influx: api url %q: %v", redactURL(apiURL), err))
	}
	u.Path = path.Join(u.Path, "query")
	q := u.Query()
	q.Set("org", org)
	u.RawQuery = q.Encode()
	return u.String()
}

// queryRequest is the JSON body of POST /api/v2/query, with the dialect the
// client library sends (annotations datatype, group and default; header;
// comma delimiter).
type queryRequest struct {
	Query   string       `json:"query"`
	Type    string       `json:"type"`
	Dialect queryDialect `json:"dialect"`
}

type queryDialect struct {
	Annotations []string `json:"annotations"`
	Delimiter   string   `json:"delimiter"`
	Header      bool     `json:"header"`
}

// openQuery posts flux and returns the response body (annotated CSV),
// decompressed when the server gzipped it. The request goes through the
// library's HTTP service, so the Authorization ("Token ...") and User-Agent
// headers are the library's, and a non-2xx answer comes back as its
// *http.Error (status, Retry-After, message) for classify.
func (c *Client) openQuery(ctx context.Context, flux string) (io.ReadCloser, error) {
	body, err := json.Marshal(queryRequest{Query: flux, Type: "flux", Dialect: queryDialect{
		Annotations: []string{"datatype", "group", "default"}, Delimiter: ",", Header: true}})
	if err != nil {
		return nil, err
	}
	var resp *http.Response
	herr := c.ic.HTTPService().DoPostRequest(ctx, c.queryURL, bytes.NewReader(body), func(req *http.Request) {
		req.Header.Set("Content-Type", "application/json")
		if c.opt.QueryGzip {
			req.Header.Set("Accept-Encoding", "gzip")
		} else {
			// An explicit identity keeps the transport from asking for
			// gzip on its own.
			req.Header.Set("Accept-Encoding", "identity")
		}
	}, func(r *http.Response) error {
		resp = r
		return nil
	})
	if herr != nil {
		return nil, herr
	}
	if resp.Header.Get("Content-Encoding") == "gzip" {
		zr, err := gzip.NewReader(resp.Body)
		if err != nil {
			resp.Body.Close()
			return nil, ihttp.NewError(err)
		}
		return gzipBody{zr, resp.Body}, nil
	}
	return resp.Body, nil
}

type gzipBody struct {
	*gzip.Reader
	raw io.ReadCloser
}

func (g gzipBody) Close() error {
	g.Reader.Close()
	return g.raw.Close()
}
