package lsq

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// The data files are NIST ITL Statistical Reference Datasets, copied byte for
// byte (see ../shared/refdata/nist-strd/README.md for origin and sha256);
// the certified values are read from each file's own header.

func loadStRD(t testing.TB, name string) *strdSet {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("testdata", name+".dat"))
	if err != nil {
		t.Fatal(err)
	}
	set, err := parseStRD(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	return set
}

// lre is the log relative error -log10(|est-cert|/|cert|), capped at 15.
func lre(est, cert float64) float64 {
	if est == cert {
		return 15
	}
	if cert == 0 {
		return -math.Log10(math.Abs(est))
	}
	return math.Min(15, -math.Log10(math.Abs(est-cert)/math.Abs(cert)))
}

func TestParseStRDCertified(t *testing.T) {
	// Spot values from the file headers (NIST StRD).
	tests := []struct {
		name      string
		nParams   int
		nObs      int
		cols      int
		firstCert float64
		ss        float64
	}{
		{"Norris", 2, 36, 1, -0.262323073774029, 26.6173985294224},
		{"Pontius", 3, 40, 1, 0.673565789473684e-03, 0.155761768796992e-05},
		{"Longley", 7, 16, 6, -3482258.63459582, 836424.055505915},
		{"Misra1a", 2, 14, 1, 2.3894212918e+02, 1.2455138894e-01},
		{"Chwirut2", 3, 54, 1, 1.6657666537e-01, 5.1304802941e+02},
		{"DanWood", 2, 6, 1, 7.6886226176e-01, 4.3173084083e-03},
		{"BoxBOD", 2, 6, 1, 2.1380940889e+02, 1.1680088766e+03},
	}
	for _, tc := range tests {
		s := loadStRD(t, tc.name)
		if got, want := len(s.params), tc.nParams; got != want {
			t.Errorf("%s params: got %d, want %d", tc.name, got, want)
		}
		if got, want := len(s.y), tc.nObs; got != want {
			t.Errorf("%s observations: got %d, want %d", tc.name, got, want)
		}
		if got, want := len(s.x[0]), tc.cols; got != want {
			t.Errorf("%s predictors: got %d, want %d", tc.name, got, want)
		}
		if got, want := s.params[0].cert, tc.firstCert; got != want {
			t.Errorf("%s first certified value: got %v, want %v", tc.name, got, want)
		}
		if got, want := s.residualSS, tc.ss; got != want {
			t.Errorf("%s residual SS: got %v, want %v", tc.name, got, want)
		}
	}
}

func TestParseStRDLineEnds(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("testdata", "Misra1a.dat"))
	if err != nil {
		t.Fatal(err)
	}
	lf, err := parseStRD(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	crlf, err := parseStRD(strings.NewReader(strings.ReplaceAll(string(b), "\n", "\r\n") + "   \r\n\r\n"))
	if err != nil {
		t.Fatal(err)
	}
	if len(lf.y) != len(crlf.y) || lf.y[13] != crlf.y[13] || lf.params[1].sd != crlf.params[1].sd {
		t.Errorf("CRLF and LF parses differ")
	}
}

func TestParseStRDErrors(t *testing.T) {
	tests := []struct{ name, in, want string }{
		{"no data", "b1 = 1 2 3 4\n", "no line beginning"},
		{"no params", "Data: y x\n1 2\n", "no certified parameter"},
		{"bad row", "  B0 1 2\nData: y x\n1 2\n3\n", "line 4: 1 fields, want 2"},
		{"bad number", "  B0 1 2\nData: y x\n1 zz\n", "line 3: field 2"},
		{"bad param", "  b1 = 1 2 x 4\nData: y x\n1 2\n", "line 1: field 5"},
	}
	for _, tc := range tests {
		_, err := parseStRD(strings.NewReader(tc.in))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: got %v, want error containing %q", tc.name, err, tc.want)
		}
	}
}

func FuzzParseStRD(f *testing.F) {
	for _, n := range []string{"Norris", "Misra1a", "Longley"} {
		b, err := os.ReadFile(filepath.Join("testdata", n+".dat"))
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Add([]byte("  B0 1 2\r\nData: y x\r\n1 2\r\n"))
	f.Add([]byte("b1 = 1 2 3 4\nData:\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		s, err := parseStRD(bytes.NewReader(b))
		if err != nil {
			return
		}
		if len(s.params) == 0 || len(s.y) == 0 || len(s.y) != len(s.x) {
			t.Fatalf("accepted an incomplete set: %d params, %d y, %d x", len(s.params), len(s.y), len(s.x))
		}
		for i := range s.x {
			if len(s.x[i]) != len(s.x[0]) {
				t.Fatalf("row %d has %d predictors, row 0 has %d", i, len(s.x[i]), len(s.x[0]))
			}
		}
	})
}

func TestLinearNIST(t *testing.T) {
	tests := []struct {
		name   string
		minLRE float64 // suggested pass marks, REFERENCES.md §1
		design func(x []float64) []float64
	}{
		{"Norris", 9, func(x []float64) []float64 { return []float64{1, x[0]} }},
		{"Pontius", 7, func(x []float64) []float64 { return []float64{1, x[0], x[0] * x[0]} }},
		{"Longley", 7, func(x []float64) []float64 { return append([]float64{1}, x...) }},
	}
	for _, tc := range tests {
		s := loadStRD(t, tc.name)
		n := len(tc.design(s.x[0]))
		xm := mat.NewDense(len(s.y), n, nil)
		for i, row := range s.x {
			xm.SetRow(i, tc.design(row))
		}
		res, err := Linear(xm, s.y)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		worst := 15.0
		for j, p := range s.params {
			worst = math.Min(worst, lre(res.Params[j], p.cert))
			worst = math.Min(worst, lre(res.SE[j], p.sd))
		}
		worst = math.Min(worst, lre(res.ResidualSD, s.residualSD))
		worst = math.Min(worst, lre(res.SS, s.residualSS))
		worst = math.Min(worst, lre(res.R2, s.r2))
		t.Logf("%s: worst LRE %.2f", tc.name, worst)
		if worst < tc.minLRE {
			t.Errorf("%s: worst LRE got %.2f, want >= %g", tc.name, worst, tc.minLRE)
		}
	}
}

type nlModel struct {
	name string
	f    func(b []float64, x float64) float64
	grad func(b []float64, x float64, g []float64)
}

var nlModels = []nlModel{
	{"Misra1a", func(b []float64, x float64) float64 { return b[0] * (1 - math.Exp(-b[1]*x)) },
		func(b []float64, x float64, g []float64) {
			e := math.Exp(-b[1] * x)
			g[0], g[1] = 1-e, b[0]*x*e
		}},
	{"Chwirut2", func(b []float64, x float64) float64 { return math.Exp(-b[0]*x) / (b[1] + b[2]*x) },
		func(b []float64, x float64, g []float64) {
			e, d := math.Exp(-b[0]*x), b[1]+b[2]*x
			g[0] = -x * e / d
			g[1] = -e / (d * d)
			g[2] = -x * e / (d * d)
		}},
	{"DanWood", func(b []float64, x float64) float64 { return b[0] * math.Pow(x, b[1]) },
		func(b []float64, x float64, g []float64) {
			p := math.Pow(x, b[1])
			g[0], g[1] = p, b[0]*p*math.Log(x)
		}},
	{"BoxBOD", func(b []float64, x float64) float64 { return b[0] * (1 - math.Exp(-b[1]*x)) },
		func(b []float64, x float64, g []float64) {
			e := math.Exp(-b[1] * x)
			g[0], g[1] = 1-e, b[0]*x*e
		}},
}

func problemFor(s *strdSet, md nlModel, analytic bool) Problem {
	n := len(s.params)
	pr := Problem{M: len(s.y), Residuals: func(b, r []float64) {
		for i := range s.y {
			r[i] = s.y[i] - md.f(b, s.x[i][0])
		}
	}}
	if analytic {
		g := make([]float64, n)
		pr.Jacobian = func(b, jac []float64) {
			for i := range s.y {
				md.grad(b, s.x[i][0], g)
				for j := range n {
					jac[i*n+j] = -g[j]
				}
			}
		}
	}
	return pr
}

func TestNonlinearNIST(t *testing.T) {
	for _, md := range nlModels {
		s := loadStRD(t, md.name)
		for _, analytic := range []bool{true, false} {
			for start := range 2 {
				p0 := make([]float64, len(s.params))
				for j, p := range s.params {
					p0[j] = p.start[start]
				}
				res, err := Minimize(problemFor(s, md, analytic), p0, nil)
				if err != nil {
					t.Errorf("%s start %d analytic=%v: %v", md.name, start+1, analytic, err)
					continue
				}
				worst := lre(res.SS, s.residualSS)
				for j, p := range s.params {
					worst = math.Min(worst, lre(res.Params[j], p.cert))
					worst = math.Min(worst, lre(res.SE[j], p.sd))
				}
				t.Logf("%s start %d analytic=%v: worst LRE %.2f in %d iterations (%v)", md.name, start+1, analytic, worst, res.Iterations, res.Status)
				if worst < 6 {
					t.Errorf("%s start %d analytic=%v: worst LRE got %.2f, want >= 6", md.name, start+1, analytic, worst)
				}
			}
		}
	}
}

// MinimizeNormal with a streamed JᵀJ must agree with the residual form.
func TestMinimizeNormalMatchesResidualForm(t *testing.T) {
	s := loadStRD(t, "Misra1a")
	md := nlModels[0]
	f := func(b, jtj, jtr []float64) float64 {
		var ss float64
		g := make([]float64, 2)
		if jtj != nil {
			clear(jtj)
			clear(jtr)
		}
		for i := range s.y {
			x := s.x[i][0]
			r := s.y[i] - md.f(b, x)
			ss += r * r
			if jtj != nil {
				md.grad(b, x, g)
				for a := range 2 {
					jtr[a] -= g[a] * r
					for c := range 2 {
						jtj[a*2+c] += g[a] * g[c]
					}
				}
			}
		}
		return ss
	}
	res, err := MinimizeNormal(f, []float64{500, 1e-4}, len(s.y), nil)
	if err != nil {
		t.Fatal(err)
	}
	for j, p := range s.params {
		if l := lre(res.Params[j], p.cert); l < 6 {
			t.Errorf("b%d: LRE got %.2f, want >= 6", j+1, l)
		}
		if l := lre(res.SE[j], p.sd); l < 6 {
			t.Errorf("SE b%d: LRE got %.2f, want >= 6", j+1, l)
		}
	}
}

func TestMinimizeErrors(t *testing.T) {
	pr := Problem{M: 2, Residuals: func(p, r []float64) { r[0], r[1] = p[0], p[1] }}
	if _, err := Minimize(pr, []float64{1, 2}, nil); err != ErrNoDegreesOfFreedom {
		t.Errorf("got %v, want ErrNoDegreesOfFreedom", err)
	}
	// p[1] does not enter the residuals: not identifiable.
	pr = Problem{M: 3, Residuals: func(p, r []float64) { r[0], r[1], r[2] = p[0]-1, p[0]-2, p[0]-3 }}
	res, err := Minimize(pr, []float64{0, 1}, nil)
	if err == nil || res.Status != Singular {
		t.Errorf("got status %v, err %v; want Singular", res.Status, err)
	}
}

func BenchmarkMinimizeMisra1a(b *testing.B) {
	s := loadStRD(b, "Misra1a")
	pr := problemFor(s, nlModels[0], true)
	for b.Loop() {
		if _, err := Minimize(pr, []float64{250, 5e-4}, nil); err != nil {
			b.Fatal(err)
		}
	}
}
