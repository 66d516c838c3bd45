package influx

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"net/url"
	"sort"
	"strconv"
	"strings"
)

// InfluxQL over the v1 query API.
//
// InfluxDB 1.x serves InfluxQL on /query natively, and 2.x and 3.x serve the
// same endpoint for compatibility (3.x has no Flux at all). With
// Options.Language set to LanguageInfluxQL, Pull and PullWithInflow send
//
//	SELECT "level"[,"inflow"] FROM "measurement"
//	WHERE ("tank" = 'T1' OR "tank" = 'T2') AND "site" = 'a'
//	  AND time >= <start>ns AND time < <stop>ns GROUP BY "tank"
//
// to /query with db and rp from the bucket ("db/rp", or a database name),
// epoch=ns and chunked=true (the server streams results in chunks of
// chunkRows points, so memory stays bounded), authorised by the same
// "Token ..." header as Flux (1.8 takes "user:password", 2.x and 3.x a
// token). Identifiers are double-quoted and string literals single-quoted,
// each with its quote and backslash escaped (the InfluxQL reference's
// quoting rules), so hostile tank ids stay literals. The result is the same
// stream of samples as Flux gives: per tank in time order, samples at stop
// dropped.

// The query languages.
const (
	LanguageFlux     = "flux"
	LanguageInfluxQL = "influxql"
)

// chunkRows is the chunk size asked of the server.
const chunkRows = 10000

func qlIdent(s string) string {
	return `"` + strings.NewReplacer(`\`, `\\`, `"`, `\"`).Replace(s) + `"`
}

func qlString(s string) string {
	// a raw line feed ends an InfluxQL string literal: it is written \n
	return `'` + strings.NewReplacer(`\`, `\\`, `'`, `\'`, "\n", `\n`).Replace(s) + `'`
}

// InfluxQL returns the query text of one window (for logs and tests; it
// holds no secret).
func (s *Source) InfluxQL(tanks []string, startNs, stopNs int64, withInflow bool) string {
	var b strings.Builder
	b.WriteString("SELECT ")
	b.WriteString(qlIdent(s.spec.Field))
	if withInflow && s.spec.InflowField != "" {
		b.WriteString(",")
		b.WriteString(qlIdent(s.spec.InflowField))
	}
	b.WriteString(" FROM ")
	b.WriteString(qlIdent(s.spec.Measurement))
	b.WriteString(" WHERE ")
	if len(tanks) > 0 {
		b.WriteString("(")
		for i, t := range tanks {
			if i > 0 {
				b.WriteString(" OR ")
			}
			b.WriteString(qlIdent(s.spec.TankTag) + " = " + qlString(t))
		}
		b.WriteString(") AND ")
	}
	keys := make([]string, 0, len(s.spec.Tags))
	for k := range s.spec.Tags {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		b.WriteString(qlIdent(k) + " = " + qlString(s.spec.Tags[k]) + " AND ")
	}
	fmt.Fprintf(&b, "time >= %d AND time < %d GROUP BY %s", startNs, stopNs, qlIdent(s.spec.TankTag))
	return b.String()
}

// dbRP splits the bucket into database and retention policy.
func dbRP(bucket string) (db, rp string) {
	if i := strings.IndexByte(bucket, '/'); i >= 0 {
		return bucket[:i], bucket[i+1:]
	}
	return bucket, ""
}

// openInfluxQL sends q to the v1 query endpoint and returns the streaming
// body; a status other than 2xx is the library's typed error (classified
// for retries like a Flux query's).
func (c *Client) openInfluxQL(ctx context.Context, q string) (io.ReadCloser, error) {
	db, rp := dbRP(c.conn.Bucket)
	v := url.Values{"db": {db}, "q": {q}, "epoch": {"ns"}, "chunked": {"true"}, "chunk_size": {strconv.Itoa(chunkRows)}}
	if rp != "" {
		v.Set("rp", rp)
	}
	u := strings.TrimSuffix(c.ic.HTTPService().ServerURL(), "/") + "/query"
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, u, strings.NewReader(v.Encode()))
	if err != nil {
		return nil, err
	}
	req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	req.Header.Set("Accept", "application/json")
	var resp *http.Response
	herr := c.ic.HTTPService().DoHTTPRequest(req, nil, func(r *http.Response) error {
		resp = r
		return nil
	})
	if herr != nil {
		return nil, herr
	}
	return resp.Body, nil
}

// qlRows reads the chunked JSON of /query: one object per chunk, each with
// results[].series[] of {tags, columns, values}.
type qlRows struct {
	dec               *json.Decoder
	tankTag           string
	field, auxField   string
	series            []qlSeries
	si, vi            int
	iTime, iVal, iAux int
	tank              []byte
}

type qlSeries struct {
	Tags    map[string]string `json:"tags"`
	Columns []string          `json:"columns"`
	Values  [][]any           `json:"values"`
}

type qlChunk struct {
	Results []struct {
		Series []qlSeries `json:"series"`
		Error  string     `json:"error"`
	} `json:"results"`
	Error string `json:"error"`
}

func newQLRows(body io.Reader, tankTag, field, auxField string) *qlRows {
	d := json.NewDecoder(body)
	d.UseNumber()
	return &qlRows{dec: d, tankTag: tankTag, field: field, auxField: auxField, si: -1}
}

// errQL is an error the server reported inside a 200 response (a bad
// query, an unknown database): retrying does not fix it.
type errQL struct{ msg string }

func (e errQL) Error() string { return "influxql: " + e.msg }

func (r *qlRows) nextPair() (tank []byte, tNs int64, v, aux float64, ok bool, err error) {
	for {
		if r.si >= 0 && r.si < len(r.series) {
			s := &r.series[r.si]
			for r.vi < len(s.Values) {
				row := s.Values[r.vi]
				r.vi++
				if r.iTime >= len(row) || r.iVal >= len(row) {
					continue
				}
				t, okT := qlInt(row[r.iTime])
				lv, okV := qlFloat(row[r.iVal])
				if !okT || !okV {
					continue // a null level (the row holds only the inflow)
				}
				a := math.NaN()
				if r.iAux >= 0 && r.iAux < len(row) {
					if x, ok := qlFloat(row[r.iAux]); ok {
						a = x
					}
				}
				return r.tank, t, lv, a, true, nil
			}
			r.si++
			if r.si < len(r.series) {
				r.begin()
			}
			continue
		}
		var ch qlChunk
		if err := r.dec.Decode(&ch); err != nil {
			if errors.Is(err, io.EOF) {
				return nil, 0, 0, 0, false, nil
			}
			return nil, 0, 0, 0, false, fmt.Errorf("influxql result: %w", err)
		}
		if ch.Error != "" {
			return nil, 0, 0, 0, false, errQL{ch.Error}
		}
		r.series = r.series[:0]
		for _, res := range ch.Results {
			if res.Error != "" {
				return nil, 0, 0, 0, false, errQL{res.Error}
			}
			r.series = append(r.series, res.Series...)
		}
		r.si = 0
		if len(r.series) > 0 {
			r.begin()
		}
	}
}

// begin sets up the current series' columns and tank.
func (r *qlRows) begin() {
	s := &r.series[r.si]
	r.vi, r.iTime, r.iVal, r.iAux = 0, -1, -1, -1
	for i, c := range s.Columns {
		switch c {
		case "time":
			r.iTime = i
		case r.field:
			r.iVal = i
		case r.auxField:
			if r.auxField != "" {
				r.iAux = i
			}
		}
	}
	if r.iTime < 0 || r.iVal < 0 {
		s.Values = nil // not our series
	}
	r.tank = []byte(s.Tags[r.tankTag])
}

func qlInt(x any) (int64, bool) {
	n, ok := x.(json.Number)
	if !ok {
		return 0, false
	}
	i, err := n.Int64()
	return i, err == nil
}

func qlFloat(x any) (float64, bool) {
	n, ok := x.(json.Number)
	if !ok {
		return 0, false
	}
	f, err := n.Float64()
	return f, err == nil && !math.IsNaN(f) && !math.IsInf(f, 0)
}
