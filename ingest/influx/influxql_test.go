package influx

import (
	"strconv"
	"strings"
	"testing"
)

// The InfluxQL text: identifiers double-quoted and literals single-quoted
// with their quote and backslash escaped, a line feed as \n (the InfluxQL
// reference's string and identifier rules), the window half-open in ns.
func TestInfluxQLText(t *testing.T) {
	c := &Client{opt: Options{Language: LanguageInfluxQL}}
	src, err := c.Source(SeriesSpec{Measurement: `tank "level"`, Field: "level", InflowField: "q", Tags: map[string]string{"site": `north's`, "area": "b"}})
	if err != nil {
		t.Fatal(err)
	}
	got := src.InfluxQL([]string{`a'b`, `c\d`, "e\nf"}, 100, 200, true)
	want := `SELECT "level","q" FROM "tank \"level\"" WHERE ("tank" = 'a\'b' OR "tank" = 'c\\d' OR "tank" = 'e\nf') AND "area" = 'b' AND "site" = 'north\'s' AND time >= 100 AND time < 200 GROUP BY "tank"`
	if got != want {
		t.Errorf("query\n got %s\nwant %s", got, want)
	}
}

// The chunked JSON of /query: two chunks, a null level (an inflow-only
// row) skipped, a null inflow read as NaN, an error inside a 200 reported.
func TestQLRows(t *testing.T) {
	body := `{"results":[{"statement_id":0,"series":[{"name":"m","tags":{"tank":"T1"},"columns":["time","level","q"],"values":[[100,1.5,null],[110,null,2],[120,1.4,3]]}],"partial":true}]}
{"results":[{"statement_id":0,"series":[{"name":"m","tags":{"tank":"T 2"},"columns":["time","level","q"],"values":[[100,7,1]]}]}]}
`
	r := newQLRows(strings.NewReader(body), "tank", "level", "q")
	var got []string
	for {
		tank, tNs, v, a, ok, err := r.nextPair()
		if err != nil {
			t.Fatal(err)
		}
		if !ok {
			break
		}
		got = append(got, string(tank)+"|"+itoa(tNs)+"|"+ftoa(v)+"|"+ftoa(a))
	}
	if want := "T1|100|1.5|NaN T1|120|1.4|3 T 2|100|7|1"; strings.Join(got, " ") != want {
		t.Errorf("rows %q, want %q", strings.Join(got, " "), want)
	}
	r = newQLRows(strings.NewReader(`{"results":[{"statement_id":0,"error":"database not found: nope"}]}`), "tank", "level", "")
	if _, _, _, _, _, err := r.nextPair(); err == nil || !strings.Contains(err.Error(), "database not found") {
		t.Errorf("error in a 200 response: %v", err)
	}
}

// FuzzQLRows: any body gives rows or an error, never a panic or a hang.
func FuzzQLRows(f *testing.F) {
	f.Add(`{"results":[{"series":[{"tags":{"tank":"T"},"columns":["time","level"],"values":[[1,2]]}]}]}`)
	f.Add(`{"results":[{"series":[{"columns":["level"],"values":[[1,2,3],[]]}]}]}`)
	f.Add(`{"error":"x"}`)
	f.Add(`[1,2`)
	f.Fuzz(func(t *testing.T, body string) {
		r := newQLRows(strings.NewReader(body), "tank", "level", "q")
		for range 1000 {
			_, _, _, _, ok, err := r.nextPair()
			if !ok || err != nil {
				return
			}
		}
	})
}

func itoa(n int64) string   { return strconv.FormatInt(n, 10) }
func ftoa(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
