package influx

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"reflect"
	"strconv"
	"strings"
	"testing"
	"time"
)

type row struct {
	tank string
	t    int64
	v    float64
}

// readAll runs the reader over body and collects the rows.
func readAll(body io.Reader, tag string) ([]row, error) {
	return readAllPath(body, tag, false)
}

// readAllPath is readAll with the fast path for plain rows on or off.
func readAllPath(body io.Reader, tag string, noFast bool) ([]row, error) {
	rows := newCSVRows(body, tag)
	rows.noFast = noFast
	var out []row
	for {
		tank, t, v, ok, err := rows.next()
		if err != nil || !ok {
			return out, err
		}
		out = append(out, row{string(tank), t, v})
	}
}

const hdr = "#datatype,string,long,dateTime:RFC3339,double,string\r\n#group,false,false,false,false,true\r\n#default,_result,,,,\r\n,result,table,_time,_value,tank\r\n"

func TestCSVRows(t *testing.T) {
	tests := []struct {
		name string
		body string
		want []row
		err  string // substring of the error, "" for none
	}{
		{"1.8 shape, CRLF, two tables in one block", hdr +
			",,0,2024-03-01T00:00:00Z,1.5,T1\r\n,,0,2024-03-01T00:00:10Z,1.25,T1\r\n,,1,2024-03-01T00:00:00Z,2.5,T2\r\n\r\n",
			[]row{{"T1", t0, 1.5}, {"T1", t0 + 10e9, 1.25}, {"T2", t0, 2.5}}, ""},
		{"LF line ends and no final newline", strings.ReplaceAll(hdr, "\r\n", "\n") + ",,0,2024-03-01T00:00:00.5Z,-3,T1",
			[]row{{"T1", t0 + 5e8, -3}}, ""},
		{"quoted tank ids: comma, quote, line break (CRLF inside quotes becomes LF)", hdr +
			",,0,2024-03-01T00:00:00Z,1,\"sp ace,comma=eq\"\r\n,,1,2024-03-01T00:00:00Z,2,\"q\"\"uote\"\r\n,,2,2024-03-01T00:00:00Z,3,\"new\r\nline\"\r\n",
			[]row{{"sp ace,comma=eq", t0, 1}, {`q"uote`, t0, 2}, {"new\nline", t0, 3}}, ""},
		{"empty value and empty tank skipped; default fills the tank",
			"#datatype,string,long,dateTime:RFC3339,double,string\n#group,false,false,false,false,true\n#default,_result,,,,T9\n,result,table,_time,_value,tank\n" +
				",,0,2024-03-01T00:00:00Z,,T1\n,,0,2024-03-01T00:00:01Z,4,\n",
			[]row{{"T9", t0 + 1e9, 4}}, ""},
		{"long, unsignedLong and string values; new blocks with other column orders",
			"#datatype,string,long,string,dateTime:RFC3339Nano,long\n#group,false,false,true,false,false\n#default,_result,,,,\n,result,table,tank,_time,_value\n,,0,A,2024-03-01T00:00:00.000000001Z,-7\n\n" +
				"#datatype,string,long,unsignedLong,string,dateTime:RFC3339\n#group,false,false,false,true,false\n#default,_result,,,,\n,result,table,_value,tank,_time\n,,1,18446744073709551615,B,2024-03-01T00:00:00Z\n\n" +
				"#datatype,string,long,dateTime:RFC3339,string,string\n#group,false,false,false,false,true\n#default,_result,,,,\n,result,table,_time,_value,tank\n,,2,2024-03-01T00:00:00Z,high,C\n",
			[]row{{"A", t0 + 1, -7}, {"B", t0, 18446744073709551615}}, ""},
		{"time with an offset goes through time.Parse", hdr + ",,0,2024-03-01T01:00:00+01:00,1,T1\n", []row{{"T1", t0, 1}}, ""},
		{"no tank column: rows skipped", "#datatype,string,long,dateTime:RFC3339,double\n#group,false,false,false,false\n#default,_result,,,\n,result,table,_time,_value\n,,0,2024-03-01T00:00:00Z,1\n", nil, ""},
		{"blank and one-cell lines skipped; foreign first cells ignored", hdr + "\r\nfoo\r\nx,,0,2024-03-01T00:00:00Z,1,T1\r\n,,0,2024-03-01T00:00:00Z,2,T1\r\n",
			[]row{{"T1", t0, 2}}, ""},
		{"empty body", "", nil, ""},
		{"in-band error table after data", hdr + ",,0,2024-03-01T00:00:00Z,1,T1\r\n\r\n#datatype,string,string\r\n#group,true,true\r\n#default,,\r\n,error,reference\r\n,panic: out of memory,897\r\n",
			[]row{{"T1", t0, 1}}, "query error in the result: panic: out of memory,897"},
		{"in-band error without message", "#datatype,string,string\n#group,true,true\n#default,,\n,error,reference\n,,\n", nil, "unknown query error"},
		{"data before annotations", ",,0,2024-03-01T00:00:00Z,1,T1\n", nil, "line 1: data before any annotation"},
		{"row shorter than the table", hdr + ",,0,2024-03-01T00:00:00Z,1\r\n", nil, "line 5: 5 cells, the table has 6"},
		{"annotation longer than the table", "#datatype,string,long\n#group,false,false,true\n", nil, "line 2: 4 cells, the table has 3"},
		{"no #datatype", "#group,false,false,false,false,true\n,result,table,_time,_value,tank\n", nil, "line 2: table without a #datatype"},
		{"bad double", hdr + ",,0,2024-03-01T00:00:00Z,1.2.3,T1\r\n", nil, `line 5: _value: strconv.ParseFloat: parsing "1.2.3"`},
		{"bad time", hdr + ",,0,2024-02-30T00:00:00Z,1,T1\r\n", nil, `line 5: _time "2024-02-30T00:00:00Z"`},
		{"bare quote", hdr + ",,0,2024-03-01T00:00:00Z,1,T\"1\r\n", nil, "line 5: bare \""},
		{"text after a closing quote", hdr + ",,0,2024-03-01T00:00:00Z,1,\"T\"1\r\n", nil, "line 5: extraneous"},
		{"quote open at the end", hdr + ",,0,2024-03-01T00:00:00Z,1,\"T1\r\n", nil, "line 5: quoted cell not closed"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := readAll(strings.NewReader(tc.body), "tank")
			if tc.err == "" && err != nil || tc.err != "" && (err == nil || !strings.Contains(err.Error(), tc.err)) {
				t.Fatalf("err = %v, want %q", err, tc.err)
			}
			if !reflect.DeepEqual(got, tc.want) {
				t.Errorf("got %v, want %v", got, tc.want)
			}
			// The general path alone, and one byte per Read, must give the same answer.
			got2, err2 := readAllPath(strings.NewReader(tc.body), "tank", true)
			if !reflect.DeepEqual(got2, got) || fmt.Sprint(err2) != fmt.Sprint(err) {
				t.Errorf("general path only: got %v, %v; want %v, %v", got2, err2, got, err)
			}
			got1, err1 := readAll(&oneByteReader{strings.NewReader(tc.body)}, "tank")
			if !reflect.DeepEqual(got1, got) || fmt.Sprint(err1) != fmt.Sprint(err) {
				t.Errorf("byte by byte: got %v, %v; want %v, %v", got1, err1, got, err)
			}
		})
	}
}

type oneByteReader struct{ r io.Reader }

func (o *oneByteReader) Read(p []byte) (int, error) {
	if len(p) == 0 {
		return 0, nil
	}
	return o.r.Read(p[:1])
}

// cutReader returns its data and then err instead of io.EOF.
type cutReader struct {
	r   io.Reader
	err error
}

func (c *cutReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	if err == io.EOF {
		err = c.err
	}
	return n, err
}

// TestCSVRowsCutMidLine: a stream cut inside a row must not deliver the
// partial row (its value may be cut short) and must report the read error.
func TestCSVRowsCutMidLine(t *testing.T) {
	body := hdr + ",,0,2024-03-01T00:00:00Z,1.25,T1\r\n,,0,2024-03-01T00:00:10Z,1.2"
	got, err := readAll(&cutReader{strings.NewReader(body), io.ErrUnexpectedEOF}, "tank")
	if !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Errorf("err = %v, want io.ErrUnexpectedEOF", err)
	}
	if want := []row{{"T1", t0, 1.25}}; !reflect.DeepEqual(got, want) {
		t.Errorf("got %v, want %v", got, want)
	}
}

// TestCSVRowsLongRecord: a record longer than the initial buffer grows it.
func TestCSVRowsLongRecord(t *testing.T) {
	long := strings.Repeat("x", 600<<10)
	body := hdr + ",,0,2024-03-01T00:00:00Z,1,\"" + long + "\"\r\n,,0,2024-03-01T00:00:00Z,2," + long + "\r\n"
	got, err := readAll(strings.NewReader(body), "tank")
	if err != nil || len(got) != 2 || got[0].tank != long || got[1].tank != long || got[1].v != 2 {
		t.Errorf("got %d rows, err %v; want 2 rows with the long tank id", len(got), err)
	}
}

// TestCSVRowsNoAllocPerRow: the allocations of a read do not grow with the
// number of rows.
func TestCSVRowsNoAllocPerRow(t *testing.T) {
	allocs := func(rows int) float64 {
		body := []byte(benchCSV(2, rows))
		rd := bytes.NewReader(body)
		return testing.AllocsPerRun(5, func() {
			rd.Reset(body)
			rows := newCSVRows(rd, "tank")
			for {
				_, _, _, ok, err := rows.next()
				if err != nil {
					t.Fatal(err)
				}
				if !ok {
					break
				}
			}
		})
	}
	small, large := allocs(10), allocs(20_000)
	if large != small {
		t.Errorf("allocations: %v for 20 rows, %v for 40000 rows; want the same", small, large)
	}
}

func TestParseTimeNs(t *testing.T) {
	tests := []struct {
		in   string
		want int64
		ok   bool
	}{
		// Unix times of the RFC 3339 strings: computed by time.Parse (Go standard library).
		{"2024-03-01T00:00:00Z", 1709251200000000000, true},
		{"2024-02-29T23:59:59.999999999Z", 1709251199999999999, true},
		{"2024-03-01T00:00:00.1Z", 1709251200100000000, true},
		{"1970-01-01T00:00:00Z", 0, true},
		{"1969-12-31T23:59:59.5Z", -500000000, true},
		{"2000-02-29T12:00:00Z", 951825600000000000, true},
		{"2024-03-01T02:00:00+02:00", 1709251200000000000, true}, // offset: time.Parse
		{"2023-02-29T00:00:00Z", 0, false},
		{"2024-13-01T00:00:00Z", 0, false},
		{"2024-03-01T24:00:00Z", 0, false},
		{"2024-03-01T00:60:00Z", 0, false},
		{"2024-03-01T00:00:60Z", 0, false},
		{"2024-03-01T00:00:00.Z", 0, false},
		{"2024-03-01T00:00:00.1234567890Z", 1709251200123456789, true}, // time.Parse truncates a tenth digit
		{"2024-03-01 00:00:00Z", 0, false},
		{"", 0, false},
	}
	for _, tc := range tests {
		got, err := parseTimeNs([]byte(tc.in))
		if (err == nil) != tc.ok || got != tc.want {
			t.Errorf("parseTimeNs(%q) = %d, %v; want %d, ok %v", tc.in, got, err, tc.want, tc.ok)
		}
	}
}

func TestFastFloat(t *testing.T) {
	for _, s := range []string{"0", "1.5", "-2.25", "0.1", "123456789012345", "0.000000000000001",
		"2.4999", "-0.0", "100000000000000.1", "1234567890123456", "1.000000000000001"} {
		got, ok := fastFloat([]byte(s))
		want, _ := strconv.ParseFloat(s, 64)
		if !ok || math.Float64bits(got) != math.Float64bits(want) {
			t.Errorf("fastFloat(%q) = %v, %v; want %v (strconv)", s, got, ok, want)
		}
	}
	for _, s := range []string{"", "-", ".", "1.", ".5", "1e3", "NaN", "+1", "1.2.3", "0x10",
		"12345678901234567", "0.00000000000000000000001"} {
		if _, ok := fastFloat([]byte(s)); ok {
			t.Errorf("fastFloat(%q): want ok false (left to strconv)", s)
		}
	}
}

func FuzzParseTimeNs(f *testing.F) {
	for _, s := range []string{"2024-03-01T00:00:00Z", "2024-02-29T23:59:59.999999999Z", "1678-01-01T00:00:00Z",
		"2261-12-31T23:59:59.9Z", "2024-03-01T00:00:00+01:00", "9999-12-31T23:59:59Z", "2024-03-01T00:00:00.Z"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		ns, ok := fastTimeNs([]byte(s))
		if !ok {
			return
		}
		tt, err := time.Parse(time.RFC3339Nano, s)
		if err != nil || tt.UnixNano() != ns {
			t.Errorf("fastTimeNs(%q) = %d; time.Parse gives %d, %v", s, ns, tt.UnixNano(), err)
		}
	})
}

func FuzzFastFloat(f *testing.F) {
	for _, s := range []string{"1.5", "-0.001", "123456789012345", "0.1234567890123456789012"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		v, ok := fastFloat([]byte(s))
		if !ok {
			return
		}
		want, err := strconv.ParseFloat(s, 64)
		if err != nil || math.Float64bits(v) != math.Float64bits(want) {
			t.Errorf("fastFloat(%q) = %v; strconv gives %v, %v", s, v, want, err)
		}
	})
}

// FuzzCSVRows feeds arbitrary bodies: the reader must not panic, and must
// give the same answer however the input is split into reads, and with its
// fast path for plain rows turned off.
func FuzzCSVRows(f *testing.F) {
	f.Add([]byte(hdr + ",,0,2024-03-01T00:00:00Z,1.5,T1\r\n,,1,2024-03-01T00:00:00Z,2,\"a,\"\"b\"\r\n"))
	f.Add([]byte("#datatype,string,string\n#group,true,true\n#default,,\n,error,reference\n,boom,1\n"))
	f.Add([]byte(hdr + ",,0,2024-03-01T00:00:00Z,\"1\r\n"))
	f.Add([]byte("#datatype,a\n,_time\n,\"\n"))
	f.Add(genCSV(rand.New(rand.NewPCG(1, 2)), nil))
	f.Fuzz(func(t *testing.T, body []byte) {
		got, err := readAll(bytes.NewReader(body), "tank")
		got1, err1 := readAll(&oneByteReader{bytes.NewReader(body)}, "tank")
		if !reflect.DeepEqual(got, got1) && !(len(got) == 0 && len(got1) == 0) || fmt.Sprint(err) != fmt.Sprint(err1) {
			t.Errorf("whole: %v, %v; byte by byte: %v, %v", got, err, got1, err1)
		}
		got2, err2 := readAllPath(bytes.NewReader(body), "tank", true)
		if !reflect.DeepEqual(got, got2) && !(len(got) == 0 && len(got2) == 0) || fmt.Sprint(err) != fmt.Sprint(err2) {
			t.Errorf("fast path: %v, %v; general path only: %v, %v", got, err, got2, err2)
		}
	})
}

// FuzzCSVRoundTrip generates valid annotated CSV from a seed (tank ids with
// commas, quotes and line breaks, double/long/unsignedLong/string values,
// empty cells, defaults, fractions of seconds, LF or CRLF, several blocks
// with other column orders) and checks that exactly the generated points
// come back.
func FuzzCSVRoundTrip(f *testing.F) {
	for i := range uint64(8) {
		f.Add(i, i*7+1)
	}
	f.Fuzz(func(t *testing.T, s1, s2 uint64) {
		var want []row
		body := genCSV(rand.New(rand.NewPCG(s1, s2)), &want)
		got, err := readAll(bytes.NewReader(body), "tank")
		if err != nil {
			t.Fatalf("%v\n%s", err, body)
		}
		if len(got) != len(want) {
			t.Fatalf("got %d rows, want %d\n%s", len(got), len(want), body)
		}
		for i := range got {
			if got[i].tank != want[i].tank || got[i].t != want[i].t || math.Float64bits(got[i].v) != math.Float64bits(want[i].v) {
				t.Fatalf("row %d: got %v, want %v\n%s", i, got[i], want[i], body)
			}
		}
	})
}

// csvCell quotes s the way encoding/csv writes it.
func csvCell(s string) string {
	if s == "" || !strings.ContainsAny(s, ",\"\r\n") && s[0] != ' ' {
		return s
	}
	return `"` + strings.ReplaceAll(s, `"`, `""`) + `"`
}

var genTanks = []string{"T1", "tank-2", "sp ace,comma", `q"uote`, "new\nline", "ünï€", "${x}", `back\slash`}

// genCSV writes random valid annotated CSV; when want is not nil it gets the
// rows the reader must return.
func genCSV(r *rand.Rand, want *[]row) []byte {
	var b strings.Builder
	nl := "\n"
	if r.IntN(2) == 0 {
		nl = "\r\n"
	}
	table := 0
	for range 1 + r.IntN(4) {
		if b.Len() > 0 {
			b.WriteString(nl)
		}
		// Column order and value type of this block.
		cols := []string{"_time", "_value", "tank", "_field"}
		r.Shuffle(len(cols), func(i, j int) { cols[i], cols[j] = cols[j], cols[i] })
		vtype := []string{"double", "long", "unsignedLong", "string"}[r.IntN(4)]
		tankDefault := ""
		if r.IntN(4) == 0 {
			tankDefault = genTanks[r.IntN(len(genTanks))]
		}
		types := map[string]string{"_time": []string{"dateTime:RFC3339", "dateTime:RFC3339Nano"}[r.IntN(2)], "_value": vtype, "tank": "string", "_field": "string"}
		b.WriteString("#datatype,string,long")
		for _, c := range cols {
			b.WriteString("," + types[c])
		}
		b.WriteString(nl + "#group,false,false")
		for range cols {
			b.WriteString(",false")
		}
		b.WriteString(nl + "#default,_result,")
		for _, c := range cols {
			b.WriteString(",")
			if c == "tank" {
				b.WriteString(csvCell(tankDefault))
			}
		}
		b.WriteString(nl + ",result,table," + strings.Join(cols, ",") + nl)
		for range r.IntN(4) {
			tank := genTanks[r.IntN(len(genTanks))]
			tns := t0 + r.Int64N(1e15) - 5e14
			for range r.IntN(20) {
				tns += r.Int64N(20e9)
				if r.IntN(3) == 0 {
					tns -= tns % 1e9
				}
				cell := map[string]string{"_time": time.Unix(0, tns).UTC().Format(time.RFC3339Nano), "_field": "level", "tank": tank}
				var v float64
				switch vtype {
				case "double":
					switch r.IntN(3) {
					case 0:
						v = math.Round(r.NormFloat64()*1e4) / 1e4
					case 1:
						v = r.NormFloat64() * math.Pow(10, float64(r.IntN(40)-20))
					default:
						v = float64(r.IntN(100))
					}
					cell["_value"] = strconv.FormatFloat(v, 'f', -1, 64)
				case "long":
					x := r.Int64() >> r.IntN(64)
					if r.IntN(2) == 0 {
						x = -x
					}
					v, cell["_value"] = float64(x), strconv.FormatInt(x, 10)
				case "unsignedLong":
					x := r.Uint64() >> r.IntN(64)
					v, cell["_value"] = float64(x), strconv.FormatUint(x, 10)
				default:
					cell["_value"] = "high"
				}
				ok := vtype != "string"
				if r.IntN(8) == 0 { // a null value
					cell["_value"], ok = "", false
				}
				got := tank
				if tankDefault != "" && r.IntN(3) == 0 {
					cell["tank"], got = "", tankDefault
				}
				b.WriteString(",," + strconv.Itoa(table))
				for _, c := range cols {
					b.WriteString("," + csvCell(cell[c]))
				}
				b.WriteString(nl)
				if ok && want != nil {
					*want = append(*want, row{got, tns, v})
				}
			}
			table++
		}
	}
	return []byte(b.String())
}
