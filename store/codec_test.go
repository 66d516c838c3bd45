package store

import (
	"math"
	"testing"

	"drainsight/model"
)

func TestEncodeFlatNonFinite(t *testing.T) {
	f := model.IdleFit{Tank: "A", RateMs: math.Inf(-1), NoiseM: math.NaN(), LeakKM25s: math.Inf(1), N: 3}
	b, err := encodeFlat(&f)
	if err != nil {
		t.Fatal(err)
	}
	got := string(b)
	want := `{"Tank":"A","StartNs":0,"EndNs":0,"N":3,"MeanHeadM":0,"RateMs":"-Inf","RateSEMs":0,"LeakKM25s":"+Inf","LeakKSEM25s":0,"NoiseM":"NaN","FlatRun":0,"Spikes":0,"GapCount":0}`
	if got != want {
		t.Errorf("got  %s\nwant %s", got, want)
	}
	var back model.IdleFit
	if err := decodeFlat(b, &back); err != nil {
		t.Fatal(err)
	}
	if !math.IsInf(back.RateMs, -1) || !math.IsInf(back.LeakKM25s, 1) || !math.IsNaN(back.NoiseM) || back.N != 3 || back.Tank != "A" {
		t.Errorf("round trip: got %+v", back)
	}
}

func TestDecodeFlatErrors(t *testing.T) {
	for _, in := range []string{`[]`, `null`, `{"KM25s":"1.5"}`, `{"KM25s":"abc"}`, `{"N":"x"}`, `{`} {
		var f model.Fit
		if err := decodeFlat([]byte(in), &f); err == nil {
			t.Errorf("decodeFlat(%s): got nil error", in)
		}
	}
	var f model.Fit
	if err := decodeFlat([]byte(`{"KM25s":0.002,"Unknown":1}`), &f); err != nil || f.KM25s != 0.002 {
		t.Errorf("unknown key: got %v, K %v", err, f.KM25s)
	}
}

// FuzzDecodeFlat checks that arbitrary stored bytes never panic and that
// whatever decodes re-encodes to something that decodes to the same value.
func FuzzDecodeFlat(f *testing.F) {
	f.Add([]byte(`{"Tank":"A","KM25s":0.002,"Cd":"NaN","EmptyHeadM":"-Inf"}`))
	f.Add([]byte(`{"N":3,"Quality":"A"}`))
	f.Add([]byte(`{}`))
	f.Add([]byte(`nonsense`))
	f.Fuzz(func(t *testing.T, data []byte) {
		var a model.Fit
		if decodeFlat(data, &a) != nil {
			return
		}
		enc, err := encodeFlat(&a)
		if err != nil {
			t.Fatalf("re-encode: %v", err)
		}
		var b model.Fit
		if err := decodeFlat(enc, &b); err != nil {
			t.Fatalf("decode of re-encoded %s: %v", enc, err)
		}
		if !fitsEqual(a, b) && !(hasNaN(a) && hasNaN(b)) {
			t.Fatalf("round trip: %+v != %+v", a, b)
		}
	})
}

func hasNaN(f model.Fit) bool {
	for _, x := range []float64{f.H0M, f.H1M, f.KM25s, f.KSEM25s, f.KLo95M25s, f.KHi95M25s, f.SigmaM, f.R2, f.Exponent, f.ExponentSE, f.DurbinWatson, f.DatumM, f.CdAM2} {
		if math.IsNaN(x) {
			return true
		}
	}
	return false
}
