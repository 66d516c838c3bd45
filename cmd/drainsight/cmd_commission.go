package main

import (
	"context"
	"fmt"
	"math"
	"time"

	"drainsight/config"
	"drainsight/model"
	"drainsight/store"
)

const commissionAbout = `Judge a commissioning drain test: the drains the scan fitted for one tank
between --since and --until (run scan over the test first), each with K and
its 95 % interval, the discharge coefficient Cd and effective area Cd*a, the
ideal K of the bore (Cd = 1), and, for the configured outlet.kind, the usual
range of Cd (or the data sheet's Kv for a valve). A result that cannot be
right is said in plain words: K above the ideal (a datum or unit error), Cd
far below the usual range (a valve partly open, an obstruction, a wrong
bore), a fit far off the square-root law (a submerged outlet, a long pipe).`

// cdRange is the usual discharge coefficient of an outlet kind and its
// source.
type cdRange struct {
	lo, hi float64
	source string
}

// cdRanges are the usual Cd of water outlets at the Reynolds numbers of a
// draining tank (well above 10^4):
var cdRanges = map[string]cdRange{
	// sharp-edged orifice: 0.60-0.64 (Lienhard & Lienhard 1984, "Velocity
	// coefficients for free jets from sharp-edged orifices", J. Fluids Eng.
	// 106; from memory, ± 0.01)
	"orifice": {0.59, 0.65, "sharp-edged orifice, 0.60-0.64 (Lienhard & Lienhard 1984; from memory ± 0.01)"},
	// short tube of 2-3 diameters with a square entry: about 0.80-0.82
	// (common practice; from memory ± 0.02)
	"short_tube": {0.76, 0.84, "short tube of 2-3 bores, about 0.80-0.82 (common practice; from memory ± 0.02)"},
}

func runCommission(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "commission", "commission --config FILE --tank ID --since TIME --until TIME", commissionAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	statePath := fs.String("state", "", "state file (default: outputs.state_file of the config)")
	tankID := fs.String("tank", "", "tank id (required)")
	since := fs.String("since", "", "start of the test window, RFC 3339 or YYYY-MM-DD (required)")
	until := fs.String("until", "", "end of the test window (required)")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" || *tankID == "" || *since == "" || *until == "" {
		return &usageError{"commission: --config, --tank, --since and --until are required"}
	}
	from, err := parseWhen(*since)
	if err != nil {
		return &usageError{"commission: --since: " + err.Error()}
	}
	to, err := parseWhen(*until)
	if err != nil || !to.After(from) {
		return &usageError{fmt.Sprintf("commission: --until %q: want a time after --since", *until)}
	}
	cfg, err := config.Load(*cfgPath)
	if err != nil {
		return err
	}
	ct := cfg.Tank(*tankID)
	if ct == nil {
		return &usageError{fmt.Sprintf("commission: no tank %q in %s", *tankID, *cfgPath)}
	}
	path := *statePath
	if path == "" {
		path = cfg.Outputs.StateFile
	}
	st, err := store.Open(path, 5*time.Second)
	if err != nil {
		return err
	}
	defer st.Close()
	all, err := st.Fits(ct.ID, 0, math.MaxInt64)
	if err != nil {
		return err
	}
	var fits []model.Fit
	for _, f := range all {
		if f.StartNs >= from.UnixNano() && f.EndNs <= to.UnixNano() {
			fits = append(fits, f)
		}
	}
	if len(fits) == 0 {
		return fmt.Errorf("commission: tank %s: no drain fitted between %s and %s (run scan over the test first)", ct.ID, from.Format(time.RFC3339), to.Format(time.RFC3339))
	}
	w := e.stdout
	bore := ct.Outlet.DiameterM
	ideal := math.NaN()
	if bore > 0 {
		ideal = math.Pi * bore * bore / 4 * model.Sqrt2g
	}
	fmt.Fprintf(w, "Commissioning test of %s, %d drains:\n\n", ct.ID, len(fits))
	fmt.Fprintln(w, "| drain start | from m | to m | K m^2.5/s | 95 % interval | Cd | Cd*a m^2 | exponent | grade |")
	fmt.Fprintln(w, "|---|---|---|---|---|---|---|---|---|")
	for _, f := range fits {
		fmt.Fprintf(w, "| %s | %.2f | %.2f | %.4g | %.4g-%.4g | %s | %.4g | %.3f | %s |\n", time.Unix(0, f.StartNs).UTC().Format("2006-01-02 15:04"),
			f.H0M, f.H1M, f.KM25s, f.KLo95M25s, f.KHi95M25s, fmtCd(model.CdFromK(f.KM25s, bore)), model.CdAFromK(f.KM25s), f.Exponent, f.Quality)
	}
	// The test's K: the precision-weighted mean of its drains.
	var sw, swk float64
	for _, f := range fits {
		if wgt := 1 / (f.KSEM25s * f.KSEM25s); f.KSEM25s > 0 {
			sw += wgt
			swk += wgt * f.KM25s
		}
	}
	k := fits[0].KM25s
	se := fits[0].KSEM25s
	if sw > 0 {
		k, se = swk/sw, math.Sqrt(1/sw)
	}
	fmt.Fprintf(w, "\nK = %.4g m^2.5/s ± %.2g (95 %% interval %.4g to %.4g); Cd*a = %.4g m^2; Kv = %.4g m^3/h.\n",
		k, 1.96*se, k-1.96*se, k+1.96*se, model.CdAFromK(k), model.KvFromK(k))
	for _, msg := range judgeCommission(ct.Outlet, k, ideal, fits) {
		fmt.Fprintln(w, msg)
	}
	fmt.Fprintln(w, "\nDraining a tank for a test is work on the plant: follow your site's procedures, local codes and licensed practice.")
	return nil
}

// judgeCommission says what the test's K means for the configured outlet.
func judgeCommission(o config.Outlet, k, ideal float64, fits []model.Fit) []string {
	var out []string
	if !math.IsNaN(ideal) {
		cd := k / ideal
		out = append(out, fmt.Sprintf("Ideal K of the %.0f mm bore (Cd = 1): %.4g m^2.5/s; measured Cd %.3f.", 1000*o.DiameterM, ideal, cd))
		switch r, ok := cdRanges[o.Kind]; {
		case cd > 1.02:
			out = append(out, "IMPLAUSIBLE: K is above the ideal constant of the bore. Check the outlet elevation (the datum), the sensor's unit and span, and the bore in the config.")
		case ok && cd < 0.5*r.lo:
			out = append(out, fmt.Sprintf("IMPLAUSIBLE: Cd %.3f is far below the usual %s: a valve partly open, an obstruction, or a wrong bore.", cd, r.source))
		case ok && (cd < r.lo || cd > r.hi):
			out = append(out, fmt.Sprintf("Unusual: Cd %.3f is outside the usual %s; check the outlet and the config.", cd, r.source))
		case ok:
			out = append(out, fmt.Sprintf("Plausible: Cd %.3f is within the usual %s.", cd, r.source))
		}
	}
	if o.Kind == "valve" && o.KvM3h > 0 {
		kv := model.KvFromK(k)
		switch {
		case kv > 1.1*o.KvM3h:
			out = append(out, fmt.Sprintf("IMPLAUSIBLE: Kv %.4g m^3/h is above the data sheet's %.4g: check the datum and the sensor's unit.", kv, o.KvM3h))
		case kv < 0.5*o.KvM3h:
			out = append(out, fmt.Sprintf("Kv %.4g m^3/h is under half the data sheet's %.4g: the valve is not fully open, or the pipe after it adds losses.", kv, o.KvM3h))
		default:
			out = append(out, fmt.Sprintf("Kv %.4g m^3/h against %.4g on the data sheet (the pipe and entry add losses of their own).", kv, o.KvM3h))
		}
	}
	for _, f := range fits {
		if math.Abs(f.Exponent-0.5) > 0.1 {
			out = append(out, fmt.Sprintf("The drain from %s does not follow the square-root law (exponent %.2f): the outlet may be submerged, or a long pipe.", time.Unix(0, f.StartNs).UTC().Format("2006-01-02 15:04"), f.Exponent))
		}
	}
	return out
}

func fmtCd(cd float64) string {
	if math.IsNaN(cd) {
		return "-"
	}
	return fmt.Sprintf("%.3f", cd)
}

// parseWhen reads RFC 3339 or a UTC date.
func parseWhen(s string) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339, s); err == nil {
		return t.UTC(), nil
	}
	return time.Parse("2006-01-02", s)
}
