package store

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"testing"
	"time"

	"drainsight/model"
)

func openTemp(t testing.TB) *Store {
	t.Helper()
	s, err := Open(filepath.Join(t.TempDir(), "state.db"), time.Second)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func testFit(tank string, endNs int64, k float64) model.Fit {
	return model.Fit{
		Tank: tank, StartNs: endNs - 600e9, EndNs: endNs, N: 120, H0M: 2.5, H1M: 0.4,
		KM25s: k, KSEM25s: 1e-5, KLo95M25s: k - 2e-5, KHi95M25s: k + 2e-5,
		SigmaM: 0.002, R2: 0.9991, Exponent: 0.5, ExponentSE: 0.01, DurbinWatson: 1.9,
		Method: "wls", Quality: model.QualityA, CdAM2: k / model.Sqrt2g,
		Cd: math.NaN(), EmptyHeadM: math.NaN(),
	}
}

// fitsEqual compares with NaN == NaN.
func fitsEqual(a, b model.Fit) bool {
	return reflect.DeepEqual(canon(a), canon(b))
}

func canon(f model.Fit) model.Fit {
	if math.IsNaN(f.Cd) {
		f.Cd = -999
	}
	if math.IsNaN(f.EmptyHeadM) {
		f.EmptyHeadM = -999
	}
	return f
}

func TestCommitTankRoundTripAndIdempotent(t *testing.T) {
	s := openTemp(t)
	fits := []model.Fit{testFit("T1", 1000e9, 0.0021), testFit("T1", 2000e9, 0.0020)}
	fits[1].Cd, fits[1].EmptyHeadM, fits[1].Complete = 0.61, 0.003, true
	idles := []model.IdleFit{{Tank: "T1", StartNs: 1100e9, EndNs: 1900e9, N: 80, MeanHeadM: 0.2, RateMs: -1e-7, RateSEMs: 1e-8}}
	cp := &Checkpoint{CommittedNs: 2500e9, ResumeNs: 2400e9, UpdatedNs: 3000e9, Samples: 2500, Drains: 2}
	c := TankCommit{Fits: fits, Idles: idles, DetectorState: []byte(`{"n":2}`), Checkpoint: cp}
	for range 3 { // the same commit again must change nothing
		if err := s.CommitTank("T1", c); err != nil {
			t.Fatal(err)
		}
	}
	got, err := s.Fits("T1", math.MinInt64, math.MaxInt64)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 {
		t.Fatalf("got %d fits, want 2", len(got))
	}
	for i := range got {
		if !fitsEqual(got[i], fits[i]) {
			t.Errorf("fit %d: got %+v, want %+v", i, got[i], fits[i])
		}
	}
	if !math.IsNaN(got[0].Cd) || got[1].Cd != 0.61 {
		t.Errorf("Cd got %v, %v; want NaN, 0.61", got[0].Cd, got[1].Cd)
	}
	gi, err := s.Idles("T1", math.MinInt64, math.MaxInt64)
	if err != nil || !reflect.DeepEqual(gi, idles) {
		t.Errorf("idles got %+v (%v), want %+v", gi, err, idles)
	}
	gcp, ok, err := s.Checkpoint("T1")
	if err != nil || !ok || gcp != *cp {
		t.Errorf("checkpoint got %+v %v %v, want %+v", gcp, ok, err, *cp)
	}
	ds, err := s.DetectorState("T1")
	if err != nil || string(ds) != `{"n":2}` {
		t.Errorf("detector state got %q %v", ds, err)
	}
	// A nil state and checkpoint leave the stored ones alone.
	if err := s.CommitTank("T1", TankCommit{Fits: fits[:1]}); err != nil {
		t.Fatal(err)
	}
	if ds, _ := s.DetectorState("T1"); string(ds) != `{"n":2}` {
		t.Errorf("detector state after nil commit: got %q", ds)
	}
	if _, ok, _ := s.Checkpoint("T2"); ok {
		t.Error("checkpoint of unknown tank: ok = true")
	}
	tanks, err := s.Tanks()
	if err != nil || !reflect.DeepEqual(tanks, []string{"T1"}) {
		t.Errorf("tanks got %v %v", tanks, err)
	}
}

func TestFitsRange(t *testing.T) {
	s := openTemp(t)
	var fits []model.Fit
	for _, end := range []int64{-5e9, 0, 10e9, 20e9, 30e9} {
		fits = append(fits, testFit("A", end, 0.001))
	}
	if err := s.CommitTank("A", TankCommit{Fits: fits}); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		from, to int64
		want     []int64
	}{
		{math.MinInt64, math.MaxInt64, []int64{-5e9, 0, 10e9, 20e9, 30e9}},
		{0, 20e9, []int64{0, 10e9}}, // [from, to)
		{-6e9, 1, []int64{-5e9, 0}},
		{31e9, 40e9, nil},
		{20e9, 20e9, nil},
	}
	for _, tc := range tests {
		got, err := s.Fits("A", tc.from, tc.to)
		if err != nil {
			t.Fatal(err)
		}
		var ends []int64
		for _, f := range got {
			ends = append(ends, f.EndNs)
		}
		if !reflect.DeepEqual(ends, tc.want) {
			t.Errorf("Fits(%d, %d): got %v, want %v", tc.from, tc.to, ends, tc.want)
		}
	}
}

func TestCommitTankReplaceRange(t *testing.T) {
	s := openTemp(t)
	old := []model.Fit{testFit("A", 10e9, 1), testFit("A", 20e9, 1), testFit("A", 30e9, 1)}
	if err := s.CommitTank("A", TankCommit{Fits: old}); err != nil {
		t.Fatal(err)
	}
	// Re-analysis of [15s, 35s) moved the second drain's end to 21 s.
	re := TankCommit{Fits: []model.Fit{testFit("A", 21e9, 2), testFit("A", 30e9, 2)}, ReplaceFromNs: 15e9, ReplaceToNs: 35e9}
	if err := s.CommitTank("A", re); err != nil {
		t.Fatal(err)
	}
	got, _ := s.Fits("A", math.MinInt64, math.MaxInt64)
	var ends []int64
	var ks []float64
	for _, f := range got {
		ends, ks = append(ends, f.EndNs), append(ks, f.KM25s)
	}
	if want := []int64{10e9, 21e9, 30e9}; !reflect.DeepEqual(ends, want) {
		t.Errorf("ends got %v, want %v", ends, want)
	}
	if want := []float64{1, 2, 2}; !reflect.DeepEqual(ks, want) {
		t.Errorf("K got %v, want %v", ks, want)
	}
}

func TestCommitTankAllOrNothing(t *testing.T) {
	s := openTemp(t)
	good := TankCommit{Fits: []model.Fit{testFit("A", 10e9, 1)}, Checkpoint: &Checkpoint{CommittedNs: 11e9, ResumeNs: 11e9}}
	if err := s.CommitTank("A", good); err != nil {
		t.Fatal(err)
	}
	// The second fit names another tank: the error comes after the first fit
	// and the state blob were put, and all of it must roll back.
	bad := TankCommit{
		Fits:          []model.Fit{testFit("A", 20e9, 1), testFit("B", 30e9, 1)},
		DetectorState: []byte("new"),
		Checkpoint:    &Checkpoint{CommittedNs: 40e9, ResumeNs: 40e9},
	}
	err := s.CommitTank("A", bad)
	if err == nil {
		t.Fatal("commit with a foreign fit: got nil error")
	}
	got, _ := s.Fits("A", math.MinInt64, math.MaxInt64)
	if len(got) != 1 {
		t.Errorf("fits after failed commit: got %d, want 1", len(got))
	}
	cp, _, _ := s.Checkpoint("A")
	if cp.CommittedNs != 11e9 {
		t.Errorf("checkpoint after failed commit: got %d, want %d", cp.CommittedNs, int64(11e9))
	}
	if ds, _ := s.DetectorState("A"); ds != nil {
		t.Errorf("detector state after failed commit: got %q, want nil", ds)
	}
	if err := s.CommitTank("A", TankCommit{Checkpoint: &Checkpoint{CommittedNs: 1, ResumeNs: 2}}); err == nil {
		t.Error("resume after committed: got nil error")
	}
}

func TestCloseWithoutCommitLosesOnlyTheOpenCommit(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state.db")
	s, err := Open(path, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	if err := s.CommitTank("A", TankCommit{Fits: []model.Fit{testFit("A", 10e9, 1)}, Checkpoint: &Checkpoint{CommittedNs: 11e9, ResumeNs: 11e9}}); err != nil {
		t.Fatal(err)
	}
	// An update that is under way when the process stops never commits.
	tx, err := s.db.Begin(true)
	if err != nil {
		t.Fatal(err)
	}
	if err := tx.Bucket(bucketTanks).Bucket([]byte("A")).Bucket(bucketFits).Put(timeKey(20e9), []byte("{}")); err != nil {
		t.Fatal(err)
	}
	tx.Rollback()
	s.Close()
	s, err = Open(path, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	got, _ := s.Fits("A", math.MinInt64, math.MaxInt64)
	if len(got) != 1 || got[0].EndNs != 10e9 {
		t.Errorf("after reopen: got %d fits, want the single committed one", len(got))
	}
}

// TestCrashMidScan kills a child process that commits as fast as it can and
// checks that the reopened file is consistent: the checkpoint, the detector
// state and the fits always describe the same commit.
func TestCrashMidScan(t *testing.T) {
	if os.Getenv("DRAINSIGHT_STORE_CRASH_CHILD") != "" {
		crashChild()
		return
	}
	if testing.Short() {
		t.Skip("spawns a child process")
	}
	path := filepath.Join(t.TempDir(), "state.db")
	for round := range 3 {
		cmd := exec.Command(os.Args[0], "-test.run=^TestCrashMidScan$")
		cmd.Env = append(os.Environ(), "DRAINSIGHT_STORE_CRASH_CHILD="+path)
		out, err := cmd.StdoutPipe()
		if err != nil {
			t.Fatal(err)
		}
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		sc := bufio.NewScanner(out)
		seen := 0
		for sc.Scan() {
			if bytes.HasPrefix(sc.Bytes(), []byte("committed ")) {
				seen++
				if seen == 20+7*round {
					break
				}
			}
		}
		cmd.Process.Kill() // SIGKILL: no deferred Close, no flush
		cmd.Wait()
		s, err := Open(path, time.Second)
		if err != nil {
			t.Fatalf("round %d: reopen after kill: %v", round, err)
		}
		cp, ok, err := s.Checkpoint("A")
		if err != nil || !ok {
			t.Fatalf("round %d: checkpoint: %v %v", round, ok, err)
		}
		fits, err := s.Fits("A", math.MinInt64, math.MaxInt64)
		if err != nil {
			t.Fatal(err)
		}
		ds, _ := s.DetectorState("A")
		n := cp.CommittedNs // commit i writes fits 0..i-1 ... see crashChild
		if int64(len(fits)) != n {
			t.Errorf("round %d: %d fits, checkpoint says %d", round, len(fits), n)
		}
		if string(ds) != strconv.FormatInt(n, 10) {
			t.Errorf("round %d: detector state %q, checkpoint %d", round, ds, n)
		}
		if n < int64(seen) {
			t.Errorf("round %d: checkpoint %d is behind the %d commits reported", round, n, seen)
		}
		s.Close()
	}
}

// crashChild commits forever: commit i re-writes fit i-1 (idempotent) and the
// new fit i, with checkpoint i+1 and detector state "i+1". It resumes from the
// stored checkpoint, as a real scan would.
func crashChild() {
	path := os.Getenv("DRAINSIGHT_STORE_CRASH_CHILD")
	s, err := Open(path, 5*time.Second)
	if err != nil {
		fmt.Println("open:", err)
		os.Exit(1)
	}
	cp, _, _ := s.Checkpoint("A")
	for i := cp.CommittedNs; ; i++ {
		fits := []model.Fit{testFit("A", i, 1)}
		if i > 0 {
			fits = append(fits, testFit("A", i-1, 1))
		}
		c := TankCommit{Fits: fits, DetectorState: []byte(strconv.FormatInt(i+1, 10)), Checkpoint: &Checkpoint{CommittedNs: i + 1, ResumeNs: i + 1}}
		if err := s.CommitTank("A", c); err != nil {
			fmt.Println("commit:", err)
			os.Exit(1)
		}
		fmt.Printf("committed %d\n", i+1)
	}
}

func TestOpenLockTimeout(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state.db")
	s, err := Open(path, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	_, err = Open(path, 100*time.Millisecond)
	if err == nil {
		t.Fatal("second Open: got nil error")
	}
	if !errors.Is(err, ErrLocked) {
		t.Errorf("second Open: got %v, want it to wrap ErrLocked", err)
	}
	if !bytes.Contains([]byte(err.Error()), []byte(path)) {
		t.Errorf("error %q does not name the file %s", err, path)
	}
	if testing.Verbose() {
		t.Log(err)
	}
}

func TestMaintenanceCRUD(t *testing.T) {
	s := openTemp(t)
	in := []Maintenance{
		{Tank: "T2", AtNs: 300, Action: ActionCleaned, Note: "outlet rodded"},
		{Tank: "T1", AtNs: 200, Action: ActionReplaced},
		{Tank: "T2", AtNs: 100, Action: ActionSensorCalibrated, Note: "zero reset"},
	}
	var ids []uint64
	for _, m := range in {
		id, err := s.AddMaintenance(m)
		if err != nil {
			t.Fatal(err)
		}
		ids = append(ids, id)
	}
	if want := []uint64{1, 2, 3}; !reflect.DeepEqual(ids, want) {
		t.Errorf("ids got %v, want %v", ids, want)
	}
	got, err := s.Maintenance("T2")
	if err != nil {
		t.Fatal(err)
	}
	want := []Maintenance{
		{ID: 3, Tank: "T2", AtNs: 100, Action: ActionSensorCalibrated, Note: "zero reset"},
		{ID: 1, Tank: "T2", AtNs: 300, Action: ActionCleaned, Note: "outlet rodded"},
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("Maintenance(T2): got %+v, want %+v", got, want)
	}
	if all, _ := s.Maintenance(""); len(all) != 3 {
		t.Errorf("Maintenance(\"\"): got %d records, want 3", len(all))
	}
	if err := s.RemoveMaintenance(1); err != nil {
		t.Fatal(err)
	}
	if err := s.RemoveMaintenance(1); !errors.Is(err, ErrNotFound) {
		t.Errorf("second remove: got %v, want ErrNotFound", err)
	}
	got, _ = s.Maintenance("T2")
	if len(got) != 1 || got[0].ID != 3 {
		t.Errorf("after remove: got %+v", got)
	}
	if _, err := s.AddMaintenance(Maintenance{Tank: "T1", Action: "painted"}); err == nil {
		t.Error("unknown action: got nil error")
	}
}

// A commissioning record keeps its test result; one without a result, with
// a window that ends before it starts or with an unusable K is refused, as
// is a test result on any other action.
func TestMaintenanceCommissioning(t *testing.T) {
	s := openTemp(t)
	test := &Commissioning{UntilNs: 900, Drains: 2, KM25s: 0.0035, KSEM25s: 4e-6}
	id, err := s.AddMaintenance(Maintenance{Tank: "T1", AtNs: 100, Action: ActionCommissioned, Test: test})
	if err != nil {
		t.Fatal(err)
	}
	got, err := s.Maintenance("T1")
	if err != nil || len(got) != 1 || got[0].ID != id || got[0].Test == nil || *got[0].Test != *test {
		t.Fatalf("stored commissioning record: %+v, %v", got, err)
	}
	for name, m := range map[string]Maintenance{
		"no result":       {Tank: "T1", AtNs: 100, Action: ActionCommissioned},
		"window reverse":  {Tank: "T1", AtNs: 100, Action: ActionCommissioned, Test: &Commissioning{UntilNs: 50, Drains: 1, KM25s: 0.003}},
		"zero K":          {Tank: "T1", AtNs: 100, Action: ActionCommissioned, Test: &Commissioning{UntilNs: 900, Drains: 1}},
		"no drains":       {Tank: "T1", AtNs: 100, Action: ActionCommissioned, Test: &Commissioning{UntilNs: 900, KM25s: 0.003}},
		"result on clean": {Tank: "T1", AtNs: 100, Action: ActionCleaned, Test: test},
	} {
		if _, err := s.AddMaintenance(m); err == nil {
			t.Errorf("%s: got nil error", name)
		}
	}
	if _, err := ParseAction("commissioned"); err == nil {
		t.Error("ParseAction accepts commissioned, which only commission --accept may record")
	}
}

func TestAlertsAndRuns(t *testing.T) {
	s := openTemp(t)
	put := []AlertRecord{
		{Key: AlertKey{"T|1", "restriction", ""}, Data: []byte("a")},
		{Key: AlertKey{"T", "tank_leak", "shell"}, Data: []byte("b")},
		{Key: AlertKey{"T", "restriction", ""}, Data: []byte("c")},
	}
	if err := s.UpdateAlerts(put, nil, nil); err != nil {
		t.Fatal(err)
	}
	got, err := s.Alerts("T")
	if err != nil {
		t.Fatal(err)
	}
	want := []AlertRecord{put[2], put[1]} // "T|1" is another tank
	if !reflect.DeepEqual(got, want) {
		t.Errorf("Alerts(T): got %+v, want %+v", got, want)
	}
	if err := s.UpdateAlerts(nil, []AlertKey{{"T", "restriction", ""}}, nil); err != nil {
		t.Fatal(err)
	}
	if _, ok, _ := s.Alert(AlertKey{"T", "restriction", ""}); ok {
		t.Error("deleted alert still there")
	}
	if d, ok, _ := s.Alert(AlertKey{"T|1", "restriction", ""}); !ok || string(d) != "a" {
		t.Errorf("Alert(T|1): got %q %v", d, ok)
	}

	if err := s.RecordRun("scan", 100, nil); err != nil {
		t.Fatal(err)
	}
	if err := s.RecordRun("scan", 200, errors.New("influx: unreachable")); err != nil {
		t.Fatal(err)
	}
	r, ok, err := s.JobRun("scan")
	wantRun := JobRun{Job: "scan", LastAttemptNs: 200, LastSuccessNs: 100, LastError: "influx: unreachable", Failures: 1}
	if err != nil || !ok || r != wantRun {
		t.Errorf("JobRun: got %+v %v %v, want %+v", r, ok, err, wantRun)
	}
	if runs, _ := s.JobRuns(); len(runs) != 1 {
		t.Errorf("JobRuns: got %d, want 1", len(runs))
	}
}

func TestBackupReopens(t *testing.T) {
	s := openTemp(t)
	if err := s.CommitTank("A", TankCommit{Fits: []model.Fit{testFit("A", 5, 1)}}); err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if _, err := s.Backup(&buf); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "copy.db")
	if err := os.WriteFile(path, buf.Bytes(), 0o600); err != nil {
		t.Fatal(err)
	}
	c, err := Open(path, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	if f, _ := c.Fits("A", math.MinInt64, math.MaxInt64); len(f) != 1 {
		t.Errorf("backup: got %d fits, want 1", len(f))
	}
}

func TestConcurrentCommitsAndReads(t *testing.T) {
	s := openTemp(t)
	done := make(chan error, 4)
	for g := range 4 {
		go func() {
			tank := fmt.Sprintf("T%d", g)
			for i := range 20 {
				if err := s.CommitTank(tank, TankCommit{Fits: []model.Fit{testFit(tank, int64(i), 1)}}); err != nil {
					done <- err
					return
				}
				if _, err := s.Fits(tank, 0, math.MaxInt64); err != nil {
					done <- err
					return
				}
			}
			done <- nil
		}()
	}
	for range 4 {
		if err := <-done; err != nil {
			t.Fatal(err)
		}
	}
	for g := range 4 {
		f, _ := s.Fits(fmt.Sprintf("T%d", g), 0, math.MaxInt64)
		if len(f) != 20 {
			t.Errorf("tank %d: got %d fits, want 20", g, len(f))
		}
	}
}

// BenchmarkCommitTank measures durable commits per second with fits per
// commit swept (each commit is two fdatasyncs).
func BenchmarkCommitTank(b *testing.B) {
	for _, n := range []int{1, 10, 100} {
		b.Run(fmt.Sprintf("fits=%d", n), func(b *testing.B) {
			s := openTemp(b)
			var i int64
			state := bytes.Repeat([]byte("x"), 2048)
			for b.Loop() {
				fits := make([]model.Fit, n)
				for j := range fits {
					fits[j] = testFit("A", i, 1)
					i++
				}
				if err := s.CommitTank("A", TankCommit{Fits: fits, DetectorState: state, Checkpoint: &Checkpoint{CommittedNs: i, ResumeNs: i}}); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "commits/s")
		})
	}
}

// The feed status is a record of its own per tank: stored, replaced, kept
// apart from the detector state and the alert records, survives a reopen,
// and goes with DeleteTank.
func TestFeeds(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state.db")
	s, err := Open(path, 0)
	if err != nil {
		t.Fatal(err)
	}
	if got, err := s.Feed("A"); err != nil || got != nil {
		t.Fatalf("no feed yet: %q, %v; want nil, nil", got, err)
	}
	if err := s.CommitTank("A", TankCommit{DetectorState: []byte("det")}); err != nil {
		t.Fatal(err)
	}
	if err := s.PutFeeds(map[string][]byte{"A": []byte(`{"state":"gap"}`), "B": []byte(`{"state":"ok"}`)}); err != nil {
		t.Fatal(err)
	}
	if err := s.PutFeeds(map[string][]byte{"A": []byte(`{"state":"silent"}`)}); err != nil {
		t.Fatal(err)
	}
	if err := s.PutFeeds(map[string][]byte{"": []byte("x")}); err == nil {
		t.Error("empty tank id: got nil error")
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	s, err = Open(path, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	for tank, want := range map[string]string{"A": `{"state":"silent"}`, "B": `{"state":"ok"}`} {
		if got, _ := s.Feed(tank); string(got) != want {
			t.Errorf("feed of %s = %q, want %q", tank, got, want)
		}
	}
	if ds, _ := s.DetectorState("A"); string(ds) != "det" {
		t.Errorf("detector state %q, want it untouched", ds)
	}
	if as, _ := s.Alerts(""); len(as) != 0 {
		t.Errorf("alert records %v, want none (a feed status is not an alert)", as)
	}
	if err := s.DeleteTank("A"); err != nil {
		t.Fatal(err)
	}
	if got, _ := s.Feed("A"); got != nil {
		t.Errorf("feed after DeleteTank: %q, want nil", got)
	}
}
