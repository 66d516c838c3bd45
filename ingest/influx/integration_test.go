package influx

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"
)

// Integration tests run against a real InfluxDB 1.8 started by
//
//	scripts/influxd.sh run -- go test ./ingest/influx/ -run Integration -v
//
// and are skipped otherwise.

func integrationConn(t *testing.T) Conn {
	t.Helper()
	u := os.Getenv("DRAINSIGHT_INFLUX_URL")
	if u == "" {
		t.Skip("set by scripts/influxd.sh run -- go test ...; see README")
	}
	return Conn{URL: u, Bucket: os.Getenv("DRAINSIGHT_INFLUX_BUCKET"), Token: os.Getenv("DRAINSIGHT_INFLUX_TOKEN")}
}

func integrationClient(t *testing.T, conn Conn, opt Options) *Client {
	t.Helper()
	c, err := New(conn, opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(c.Close)
	return c
}

// testMeasurement gives each test its own measurement in the shared database.
func testMeasurement(t *testing.T) string {
	return "lvl_" + strings.NewReplacer("/", "_", " ", "_").Replace(t.Name())
}

var itBase = time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC).UnixNano()

type sample struct {
	t int64
	v float64
}

func pullAll(t *testing.T, src *Source, tanks []string, start, stop int64, width time.Duration) map[string][]sample {
	t.Helper()
	got := map[string][]sample{}
	for _, w := range Windows(start, stop, width) {
		_, err := src.Pull(context.Background(), tanks, w[0], w[1], func(tank string, tNs int64, v float64) {
			got[tank] = append(got[tank], sample{tNs, v})
		})
		if err != nil {
			t.Fatalf("pull [%s, %s): %v", fluxTime(w[0]), fluxTime(w[1]), err)
		}
	}
	return got
}

func TestIntegrationPullWindowsJoinExactly(t *testing.T) {
	c := integrationClient(t, integrationConn(t), Options{})
	ctx := context.Background()
	meas := testMeasurement(t)
	want := map[string][]sample{}
	for k, tank := range []string{"T1", "T2"} {
		var ts []int64
		var vs []float64
		for i := range 360 { // 1 h at 10 s
			tt := itBase + int64(i)*10e9
			v := float64(k+1) + float64(i)*0.001
			ts, vs = append(ts, tt), append(vs, v)
			want[tank] = append(want[tank], sample{tt, v})
		}
		if err := c.WriteLevels(ctx, meas, "level", "tank", tank, ts, vs); err != nil {
			t.Fatal(err)
		}
	}
	// An integer field must come back too (a field's type is fixed per
	// measurement and shard, hence the other measurement).
	if err := c.write.WriteRecord(ctx, fmt.Sprintf("%s_int,tank=T3 level=7i %d", meas, itBase+5e9)); err != nil {
		t.Fatal(err)
	}
	srcInt, err := c.Source(SeriesSpec{Measurement: meas + "_int", Field: "level"})
	if err != nil {
		t.Fatal(err)
	}
	if got := pullAll(t, srcInt, nil, itBase, itBase+3600e9, time.Hour); !slices.Equal(got["T3"], []sample{{itBase + 5e9, 7}}) {
		t.Errorf("integer field: got %v, want one sample of 7 at 5 s", got)
	}
	src, err := c.Source(SeriesSpec{Measurement: meas, Field: "level"})
	if err != nil {
		t.Fatal(err)
	}
	stop := itBase + 3600e9
	// 7 min windows: every boundary falls exactly on a sample of T1 and T2.
	for _, width := range []time.Duration{7 * time.Minute, time.Hour, 10 * time.Second} {
		got := pullAll(t, src, []string{"T1", "T2", "T9"}, itBase, stop, width)
		for tank, w := range want {
			if !slices.Equal(got[tank], w) {
				t.Errorf("width %v, tank %s: got %d samples, want %d (first diff at %d)", width, tank, len(got[tank]), len(w), firstDiff(got[tank], w))
			}
		}
	}
	// The window stop is exclusive on 1.8 too.
	n, err := src.Pull(ctx, []string{"T1"}, itBase, itBase+10e9, func(string, int64, float64) {})
	if err != nil || n != 1 {
		t.Errorf("pull [0, 10 s): got %d samples (%v), want 1", n, err)
	}
}

func firstDiff(a, b []sample) int {
	for i := range min(len(a), len(b)) {
		if a[i] != b[i] {
			return i
		}
	}
	return min(len(a), len(b))
}

// hostileIDs are tank ids that break naive query building; every one must
// round-trip through line protocol and both query languages (Flux and
// InfluxQL).
var hostileIDs = []string{
	`q"uote`, `back\slash`, `dollar${x}`, `${`, `sl/ash`, `/^(x|y)$/`, `sp ace,comma=eq`,
	`ünï€`, `dbl\\back`, `.*`, `a\,b`, `end\`, `a\\`, "tab\tin", "new\nline",
}

func TestIntegrationHostileTankIDs(t *testing.T) {
	for _, lang := range []string{LanguageFlux, LanguageInfluxQL} {
		t.Run(lang, func(t *testing.T) { hostileRoundTrip(t, lang) })
	}
}

// hostileRoundTrip writes every hostile id and reads it back in lang.
func hostileRoundTrip(t *testing.T, lang string) {
	c := integrationClient(t, integrationConn(t), Options{Language: lang})
	ctx := context.Background()
	meas := testMeasurement(t)
	var ok []string
	for i, id := range hostileIDs {
		ts := []int64{itBase + int64(i)*1e9, itBase + int64(i)*1e9 + 1}
		vs := []float64{float64(i), float64(i) + 0.5}
		err := c.WriteLevels(ctx, meas, "level", "tank", id, ts, vs)
		if lineSafe(id) != nil {
			if err == nil {
				t.Errorf("write of unrepresentable id %q: got nil error", id)
			} else if !strings.Contains(err.Error(), strconv.Quote(id)) {
				t.Errorf("write of %q: error %q does not name the tank", id, err)
			}
			continue
		}
		if err != nil {
			t.Fatalf("write of %q: %v", id, err)
		}
		ok = append(ok, id)
	}
	src, err := c.Source(SeriesSpec{Measurement: meas, Field: "level"})
	if err != nil {
		t.Fatal(err)
	}
	// One query with all of them (unrepresentable ones included: the query
	// must still be valid and simply match nothing).
	got := pullAll(t, src, hostileIDs, itBase, itBase+time.Hour.Nanoseconds(), time.Hour)
	for i, id := range hostileIDs {
		var want []sample
		if slices.Contains(ok, id) {
			want = []sample{{itBase + int64(i)*1e9, float64(i)}, {itBase + int64(i)*1e9 + 1, float64(i) + 0.5}}
		}
		if !slices.Equal(got[id], want) {
			t.Errorf("tank %q: got %v, want %v", id, got[id], want)
		}
	}
	if len(got) > len(ok) {
		t.Errorf("got %d tanks, want %d: %q", len(got), len(ok), slices.Collect(mapsKeys(got)))
	}
	// The hostile spec of the golden test must be a valid query on the
	// server.
	hs, err := c.Source(SeriesSpec{Measurement: `lvl "x" ${m}`, Field: `f\n`, TankTag: "tank id",
		Tags: map[string]string{"and": `a"b`, "si/te": "${site}"}})
	if err != nil {
		t.Fatal(err)
	}
	if n, err := hs.Pull(ctx, hostileIDs, itBase, itBase+3600e9, func(string, int64, float64) {}); err != nil || n != 0 {
		t.Errorf("pull with the hostile spec: got %d samples, %v; want 0, nil", n, err)
	}
	// And each one alone, also as an extra tag filter value.
	for _, id := range ok {
		src2, err := c.Source(SeriesSpec{Measurement: meas, Field: "level", Tags: map[string]string{"tank2": id}})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := src2.Pull(ctx, []string{id}, itBase, itBase+3600e9, func(string, int64, float64) {}); err != nil {
			t.Errorf("pull with tag filter %q: %v", id, err)
		}
	}
}

func mapsKeys[V any](m map[string]V) func(func(string) bool) {
	return func(yield func(string) bool) {
		for k := range m {
			if !yield(k) {
				return
			}
		}
	}
}

func TestIntegrationWrongToken(t *testing.T) {
	conn := integrationConn(t)
	if conn.Token == "" {
		t.Skip("server runs without auth (scripts/influxd.sh run --no-auth)")
	}
	conn.Token = "admin:wrong-password"
	c := integrationClient(t, conn, Options{})
	err := c.Check(context.Background())
	var ce *ConfigError
	if !errors.As(err, &ce) || ce.Setting != "token" || ce.StatusCode != 401 {
		t.Fatalf("Check with a wrong password: got %v, want a token ConfigError with status 401", err)
	}
	t.Log(err)
	if !strings.Contains(err.Error(), "token") || strings.Contains(err.Error(), "wrong-password") {
		t.Errorf("error %q must name the token setting and never print it", err)
	}
	err = c.WriteLevels(context.Background(), "m", "level", "tank", "T1", []int64{itBase}, []float64{1})
	if !errors.As(err, &ce) || ce.Setting != "token" {
		t.Errorf("write with a wrong password: got %v, want a token ConfigError", err)
	}
}

func TestIntegrationWrongBucket(t *testing.T) {
	for _, bucket := range []string{"no_such_db/autogen", "no_such_db", "drainsight/no_such_rp"} {
		conn := integrationConn(t)
		if !strings.HasPrefix(bucket, "no_such") {
			db := strings.SplitN(conn.Bucket, "/", 2)[0]
			bucket = db + "/no_such_rp"
		}
		conn.Bucket = bucket
		c := integrationClient(t, conn, Options{Retry: Retry{Attempts: 2, Initial: time.Millisecond}})
		for op, call := range map[string]func() error{
			"check": func() error { return c.Check(context.Background()) },
			"write": func() error {
				return c.WriteLevels(context.Background(), "m", "level", "tank", "T1", []int64{itBase}, []float64{1})
			},
		} {
			err := call()
			var ce *ConfigError
			if !errors.As(err, &ce) || ce.Setting != "bucket" {
				t.Errorf("%s with bucket %q: got %v, want a bucket ConfigError", op, bucket, err)
				continue
			}
			t.Log(err)
			if !strings.Contains(err.Error(), "bucket") || !strings.Contains(err.Error(), bucket) {
				t.Errorf("%s: error %q must name the bucket setting and its value", op, err)
			}
		}
	}
}

func TestIntegrationCheckOK(t *testing.T) {
	c := integrationClient(t, integrationConn(t), Options{})
	if err := c.Check(context.Background()); err != nil {
		t.Fatal(err)
	}
}

// serverControl lets a test kill the server and start it again; the script
// exports the start command and keeps the current pid in $DIR/pid.
type serverControl struct {
	dir, start string
}

func serverControlOrSkip(t *testing.T) serverControl {
	s := serverControl{dir: os.Getenv("DRAINSIGHT_INFLUXD_DIR"), start: os.Getenv("DRAINSIGHT_INFLUXD_START")}
	if s.dir == "" || s.start == "" {
		t.Skip("needs DRAINSIGHT_INFLUXD_DIR and DRAINSIGHT_INFLUXD_START from scripts/influxd.sh run")
	}
	return s
}

func (s serverControl) kill(t *testing.T) {
	b, err := os.ReadFile(filepath.Join(s.dir, "pid"))
	if err != nil {
		t.Fatal(err)
	}
	pid, err := strconv.Atoi(strings.TrimSpace(string(b)))
	if err != nil {
		t.Fatal(err)
	}
	if err := syscall.Kill(pid, syscall.SIGKILL); err != nil {
		t.Fatalf("kill influxd %d: %v", pid, err)
	}
	for range 100 { // the pid is the script's child: wait until it is gone
		if syscall.Kill(pid, 0) != nil {
			return
		}
		time.Sleep(50 * time.Millisecond)
	}
}

func (s serverControl) restart() error {
	out, err := exec.Command(s.start).CombinedOutput()
	if err != nil {
		return fmt.Errorf("restart influxd: %v: %s", err, out)
	}
	return nil
}

// TestIntegrationServerKilledMidPull kills the server while a large window
// streams. First it stays down: the pull retries and then fails with
// ErrUnavailable. Then it is restarted while the pull is backing off: the
// pull resumes and delivers every sample exactly once.
func TestIntegrationServerKilledMidPull(t *testing.T) {
	conn := integrationConn(t)
	sc := serverControlOrSkip(t)
	ctx := context.Background()
	// A generous budget: a restart replays the WAL and may take a while on a busy machine.
	c := integrationClient(t, conn, Options{Retry: Retry{Attempts: 25, Initial: 300 * time.Millisecond, Max: 3 * time.Second}})
	meas := testMeasurement(t)
	const n = 200_000
	ts := make([]int64, n)
	vs := make([]float64, n)
	for i := range n {
		ts[i], vs[i] = itBase+int64(i)*1e9, float64(i)
	}
	if err := c.WriteLevels(ctx, meas, "level", "tank", "big", ts, vs); err != nil {
		t.Fatal(err)
	}
	src, _ := c.Source(SeriesSpec{Measurement: meas, Field: "level"})
	stop := itBase + int64(n)*1e9

	t.Run("stays down", func(t *testing.T) {
		c2 := integrationClient(t, conn, Options{Retry: Retry{Attempts: 3, Initial: 50 * time.Millisecond}})
		src2, _ := c2.Source(SeriesSpec{Measurement: meas, Field: "level"})
		killed := false
		_, err := src2.Pull(ctx, []string{"big"}, itBase, stop, func(string, int64, float64) {
			if !killed {
				killed = true
				sc.kill(t)
			}
		})
		if !killed {
			t.Fatal("no sample arrived before the end")
		}
		t.Log(err)
		if !errors.Is(err, ErrUnavailable) || !strings.Contains(err.Error(), conn.URL) {
			t.Errorf("pull from a dead server: got %v, want ErrUnavailable naming %s", err, conn.URL)
		}
		if err := sc.restart(); err != nil {
			t.Fatal(err)
		}
	})

	t.Run("comes back", func(t *testing.T) {
		var got []sample
		var restartErr = make(chan error, 1)
		retries := 0
		sleep := c.opt.Retry.withDefaults().sleep
		c.opt.Retry.sleep = func(ctx context.Context, d time.Duration) error {
			retries++
			return sleep(ctx, d)
		}
		cnt, err := src.Pull(ctx, []string{"big"}, itBase, stop, func(_ string, tNs int64, v float64) {
			if len(got) == 1000 {
				sc.kill(t)
				go func() { restartErr <- sc.restart() }()
			}
			got = append(got, sample{tNs, v})
		})
		if err != nil {
			t.Fatalf("pull across a restart: %v", err)
		}
		if err := <-restartErr; err != nil {
			t.Fatal(err)
		}
		if retries == 0 {
			t.Error("the pull never retried: the kill came too late to test resumption")
		}
		if cnt != n || len(got) != n {
			t.Fatalf("got %d samples (n=%d), want %d", len(got), cnt, n)
		}
		for i := range got {
			if got[i] != (sample{ts[i], vs[i]}) {
				t.Fatalf("sample %d: got %v, want %v", i, got[i], sample{ts[i], vs[i]})
			}
		}
		t.Logf("%d retries", retries)
	})
}
