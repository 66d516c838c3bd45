package main

import (
	"context"
	"fmt"
	"math"
	"strings"
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
bore), a fit far off the square-root law (a submerged outlet, a long pipe).

With --accept a plausible test is stored as the tank's starting baseline: a
maintenance record "commissioned" at --since with the test's K (list it with
maintenance list, undo it with maintenance remove). The next scan replays
the stored drains: the baseline restarts at the test, the test's drains are
its first drains, and once it is set the drains after the test are compared
with the test's K (a baseline more than a chance difference away, p < 0.001,
is reported as a restriction or excess outflow since commissioning).
Accepting the same window twice adds nothing.`

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
	accept := fs.Bool("accept", false, "store a plausible test as the tank's starting baseline")
	note := fs.String("note", "", "free text for the record written by --accept")
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
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	ct := cfg.Tank(*tankID)
	if ct == nil {
		return &usageError{fmt.Sprintf("commission: no tank %q in %s", *tankID, *cfgPath)}
	}
	p, err := buildPlan(*ct)
	if err != nil {
		return fmt.Errorf("%s: tank %s: %w", cfg.File, ct.ID, err)
	}
	path := *statePath
	if path == "" {
		path = cfg.Outputs.StateFile
	}
	st, err := openStore(path, false)
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
	// The test's K: the precision-weighted mean of the drains the detector
	// accepts (all of them when it accepts none, for the judgement).
	var used []model.Fit
	for _, f := range fits {
		if p.Detect.Accepts(f) {
			used = append(used, f)
		}
	}
	accepted := len(used)
	if accepted == 0 {
		used = fits
	}
	k, se := weightedK(used)
	fmt.Fprintf(w, "\nK = %.4g m^2.5/s ± %.2g (95 %% interval %.4g to %.4g) from %d drains; Cd*a = %.4g m^2; Kv = %.4g m^3/h.\n",
		k, 1.96*se, k-1.96*se, k+1.96*se, len(used), model.CdAFromK(k), model.KvFromK(k))
	msgs, implausible := judgeCommission(ct.Outlet, k, ideal, fits)
	for _, msg := range msgs {
		fmt.Fprintln(w, msg)
	}
	fmt.Fprintln(w, "\n"+commissionCaution)
	if !*accept {
		return nil
	}
	switch {
	case implausible:
		return fmt.Errorf("commission --accept: tank %s: the test is implausible (see above): correct the config or repeat the test; nothing stored", ct.ID)
	case accepted == 0:
		return fmt.Errorf("commission --accept: tank %s: no drain of the test is graded %s or better; nothing stored", ct.ID, p.Detect.MinQuality)
	}
	recs, err := st.Maintenance(ct.ID)
	if err != nil {
		return err
	}
	for _, m := range recs {
		if m.Action == store.ActionCommissioned && m.AtNs == from.UnixNano() && m.Test != nil && m.Test.UntilNs == to.UnixNano() {
			fmt.Fprintf(w, "\nThis test is already accepted as maintenance record %d; nothing added.\n", m.ID)
			return nil
		}
	}
	id, err := st.AddMaintenance(store.Maintenance{Tank: ct.ID, AtNs: from.UnixNano(), Action: store.ActionCommissioned, Note: *note,
		Test: &store.Commissioning{UntilNs: to.UnixNano(), Drains: accepted, KM25s: k, KSEM25s: se}})
	if err != nil {
		return err
	}
	fmt.Fprintf(w, "\nAccepted as maintenance record %d: the baseline of %s restarts at %s with the test's %d drains; the next scan replays the stored drains and compares the baseline with the test's K.\n",
		id, ct.ID, from.Format(time.RFC3339), accepted)
	return nil
}

// commissionCaution closes every commissioning printout.
const commissionCaution = "Filling and draining a tank for a test is work on the plant: isolate and lock out as your site's procedures require, " +
	"keep clear of the outlet and the receiving drain, watch for overflow, and follow local codes and licensed practice."

// weightedK is the precision-weighted mean K of fits (weights 1/se^2) and
// its standard error; the first fit's when none has a standard error.
func weightedK(fits []model.Fit) (k, se float64) {
	var sw, swk float64
	for _, f := range fits {
		if f.KSEM25s > 0 {
			wgt := 1 / (f.KSEM25s * f.KSEM25s)
			sw += wgt
			swk += wgt * f.KM25s
		}
	}
	if sw == 0 {
		return fits[0].KM25s, fits[0].KSEM25s
	}
	return swk / sw, math.Sqrt(1 / sw)
}

// judgeCommission says what the test's K means for the configured outlet,
// and whether it cannot be right (implausible).
func judgeCommission(o config.Outlet, k, ideal float64, fits []model.Fit) (out []string, implausible bool) {
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
		case o.Kind == "":
			out = append(out, "Set outlet.kind (orifice, short_tube or valve) to compare Cd with the usual range of the outlet.")
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
	for _, m := range out {
		implausible = implausible || strings.HasPrefix(m, "IMPLAUSIBLE")
	}
	return out, implausible
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
