package influx

import (
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"unicode/utf8"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/")

func golden(t *testing.T, name, got string) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.MkdirAll("testdata", 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if got != string(want) {
		t.Errorf("%s differs:\ngot:\n%s\nwant:\n%s", path, got, want)
	}
}

func testSource(t *testing.T, spec SeriesSpec) *Source {
	t.Helper()
	c, err := New(Conn{URL: "http://127.0.0.1:1", Bucket: "tanks/autogen"}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(c.Close)
	s, err := c.Source(spec)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func TestPullFluxGolden(t *testing.T) {
	start := int64(1709251200000000000) // 2024-03-01T00:00:00Z
	s := testSource(t, SeriesSpec{Measurement: "tank_level", Field: "level", Tags: map[string]string{"site": "plant-a"}})
	golden(t, "pull.flux", s.Flux([]string{"T2", "T1", "T2"}, start, start+86400e9+1))

	hostile := testSource(t, SeriesSpec{
		Measurement: `lvl "x" ${m}`, Field: `f\n`, TankTag: "tank id",
		Tags: map[string]string{"and": `a"b`, "si/te": "${site}"},
	})
	golden(t, "pull_hostile.flux", hostile.Flux(hostileIDs, start, start+3600e9))
	golden(t, "pull_all_tanks.flux", s.Flux(nil, -1, 1))
}

func TestFluxString(t *testing.T) {
	tests := []struct{ in, want string }{
		{`plain`, `"plain"`},
		{`a"b`, `"a\"b"`},
		{`a\b`, `"a\\b"`},
		{`${x}`, `"\${x}"`},
		{`$$ {`, `"$$ {"`},
		{`$${`, `"$\${"`},
		{"new\nline\r\t", `"new\nline\r\t"`},
		{"bell\x07", `"bell\x07"`},
		{"bad\xffutf8", `"bad\xffutf8"`},
		{`ünï€/`, `"ünï€/"`},
	}
	for _, tc := range tests {
		if got := fluxString(tc.in); got != tc.want {
			t.Errorf("fluxString(%q): got %s, want %s", tc.in, got, tc.want)
		}
		if back, err := fluxUnquote(fluxString(tc.in)); err != nil || back != tc.in {
			t.Errorf("unquote(fluxString(%q)): got %q, %v", tc.in, back, err)
		}
	}
}

// fluxUnquote decodes a Flux string literal the way Flux 0.65.1 does
// (internal/parser/strconv.go ParseText: escapes \n \r \t \\ \" \$ and \xNN;
// an unescaped "${" starts an interpolation, which we report as an error).
func fluxUnquote(lit string) (string, error) {
	if len(lit) < 2 || lit[0] != '"' || lit[len(lit)-1] != '"' {
		return "", fmt.Errorf("not quoted")
	}
	s := lit[1 : len(lit)-1]
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case c == '"':
			return "", fmt.Errorf("unescaped quote at %d", i)
		case c == '\n':
			return "", fmt.Errorf("raw newline at %d", i)
		case c == '$' && i+1 < len(s) && s[i+1] == '{':
			return "", fmt.Errorf("interpolation at %d", i)
		case c != '\\':
			b.WriteByte(c)
			continue
		}
		i++
		if i >= len(s) {
			return "", fmt.Errorf("dangling backslash")
		}
		switch s[i] {
		case 'n':
			b.WriteByte('\n')
		case 'r':
			b.WriteByte('\r')
		case 't':
			b.WriteByte('\t')
		case '\\', '"', '$':
			b.WriteByte(s[i])
		case 'x':
			var v byte
			if i+3 > len(s) {
				return "", fmt.Errorf("short \\x")
			}
			if _, err := fmt.Sscanf(s[i+1:i+3], "%02x", &v); err != nil {
				return "", err
			}
			b.WriteByte(v)
			i += 2
		default:
			return "", fmt.Errorf("invalid escape %q", s[i])
		}
	}
	return b.String(), nil
}

// fluxRegexCompile turns a Flux regex literal into the Go regexp Flux 0.65.1
// builds (internal/parser/strconv.go ParseRegexp: strip the slashes, replace
// \/ by /, regexp.Compile). The scanner (internal/scanner/scanner.rl) also
// refuses a newline inside the literal.
func fluxRegexCompile(lit string) (*regexp.Regexp, error) {
	if len(lit) < 3 || lit[0] != '/' || lit[len(lit)-1] != '/' {
		return nil, fmt.Errorf("not a regex literal")
	}
	if strings.ContainsAny(lit, "\n") {
		return nil, fmt.Errorf("newline in regex literal")
	}
	return regexp.Compile(strings.ReplaceAll(lit[1:len(lit)-1], `\/`, "/"))
}

func TestFluxRegexAnyOf(t *testing.T) {
	got := fluxRegexAnyOf([]string{"T1", "a.b", "x/y", "q\"", "new\nline"})
	want := `/^(T1|a\.b|x\/y|q"|new\x{a}line)$/`
	if got != want {
		t.Errorf("got %s, want %s", got, want)
	}
	re, err := fluxRegexCompile(fluxRegexAnyOf(hostileIDs))
	if err != nil {
		t.Fatal(err)
	}
	for _, id := range hostileIDs {
		if !re.MatchString(id) {
			t.Errorf("regex does not match %q", id)
		}
		if re.MatchString(id + "x") {
			t.Errorf("regex matches %q", id+"x")
		}
	}
}

func FuzzFluxString(f *testing.F) {
	for _, s := range hostileIDs {
		f.Add(s)
	}
	f.Add("\x00${\\\"")
	f.Fuzz(func(t *testing.T, s string) {
		lit := fluxString(s)
		back, err := fluxUnquote(lit)
		if err != nil {
			t.Fatalf("fluxString(%q) = %s: %v", s, lit, err)
		}
		if back != s {
			t.Fatalf("round trip of %q: got %q via %s", s, back, lit)
		}
	})
}

func FuzzFluxRegex(f *testing.F) {
	for _, s := range hostileIDs {
		f.Add(s, "T1")
	}
	f.Fuzz(func(t *testing.T, a, b string) {
		if !utf8.ValidString(a) || !utf8.ValidString(b) {
			t.Skip("tag values are UTF-8")
		}
		lit := fluxRegexAnyOf([]string{a, b})
		re, err := fluxRegexCompile(lit)
		if err != nil {
			t.Fatalf("%s: %v", lit, err)
		}
		if !re.MatchString(a) || !re.MatchString(b) {
			t.Fatalf("%s does not match %q and %q", lit, a, b)
		}
		if c := a + "\x00"; c != b && re.MatchString(c) {
			t.Fatalf("%s matches %q", lit, c)
		}
	})
}

func TestLineSafe(t *testing.T) {
	tests := []struct {
		in string
		ok bool
	}{
		{"T1", true}, {`q"uote`, true}, {`back\slash`, true}, {`dbl\\back`, true}, {"sp ace,comma=eq", true},
		{"${x}/y", true}, {"", false}, {`end\`, false}, {`a\\`, false}, {`a\,b`, false}, {`a\ b`, false},
		{`a\=b`, false}, {"new\nline", false}, {"tab\t", false}, {"del\x7f", false},
	}
	for _, tc := range tests {
		if err := lineSafe(tc.in); (err == nil) != tc.ok {
			t.Errorf("lineSafe(%q): got %v, want ok=%v", tc.in, err, tc.ok)
		}
	}
}

func TestSourceSpecErrors(t *testing.T) {
	c, _ := New(Conn{URL: "http://127.0.0.1:1", Bucket: "b"}, Options{})
	defer c.Close()
	for _, spec := range []SeriesSpec{
		{Field: "level"},
		{Measurement: "m"},
		{Measurement: "m", Field: "f", TankTag: "_value"},
		{Measurement: "m", Field: "f", Tags: map[string]string{"tank": "x"}},
		{Measurement: "m", Field: "f", Tags: map[string]string{"_time": "x"}},
	} {
		if _, err := c.Source(spec); err == nil {
			t.Errorf("Source(%+v): got nil error", spec)
		}
	}
}
