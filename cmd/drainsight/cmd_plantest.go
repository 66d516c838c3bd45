package main

import (
	"context"
	"fmt"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"time"

	"drainsight/config"
	"drainsight/model"
	"drainsight/scan"
	"drainsight/store"
)

const planTestAbout = `Plan a commissioning drain test for one tank: how high to fill it, how far
to let it run and how often to sample so that the test pins the outlet
constant K to the precision asked. The precision is the Cramér-Rao bound of
the fit's own model (the information matrix of the drain curve; the fit
reaches it on white noise), widened by sqrt((1+rho)/(1-rho)) for reading
noise with lag-1 correlation rho (both from the tank's recent fits unless
given), with and without a fitted datum. K is the
tank's baseline when the state file has one, else detection.design_k, else
the ideal constant of the outlet bore with its design Cd. The shortest test
that reaches the precision with the datum fitted is recommended; when none
does, the finer sampling or quieter transmitter that would reach it is said.

Filling and draining a tank for a test is work on the plant: follow your
site's procedures, local codes and licensed practice.`

func runPlanTest(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "plan-test", "plan-test --config FILE --tank ID [flags]", planTestAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	statePath := fs.String("state", "", "state file for the baseline K (default: outputs.state_file of the config)")
	tankID := fs.String("tank", "", "tank id (required)")
	precision := fs.String("precision", "0.5%", "wanted relative standard error of K")
	noise := fs.String("noise", "", "reading noise of the transmitter, a length (default: the median of the tank's recent fits, else 2 mm)")
	sampling := fs.String("sampling", "10 s", "sampling interval")
	rho := fs.Float64("rho", -1, "lag-1 correlation of the reading noise at the sampling interval (default: from the tank's recent fits, else 0)")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" || *tankID == "" {
		return &usageError{"plan-test: --config and --tank are required"}
	}
	target, err := strconv.ParseFloat(strings.TrimSuffix(strings.TrimSpace(*precision), "%"), 64)
	if err != nil || !(target > 0) {
		return &usageError{fmt.Sprintf("plan-test: --precision %q: want a percentage such as 0.5%%", *precision)}
	}
	target /= 100
	noiseM := 0.0
	if *noise != "" {
		if noiseM, err = config.ParseLength(*noise); err != nil {
			return &usageError{"plan-test: --noise: " + err.Error()}
		}
	}
	samp, err := config.ParseDuration(*sampling)
	if err != nil || samp <= 0 {
		return &usageError{fmt.Sprintf("plan-test: --sampling %q: want a positive duration", *sampling)}
	}
	if *rho >= 1 || (*rho < 0 && *rho != -1) {
		return &usageError{fmt.Sprintf("plan-test: --rho %g: want 0 <= rho < 1", *rho)}
	}
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	ct := cfg.Tank(*tankID)
	if ct == nil {
		return &usageError{fmt.Sprintf("plan-test: no tank %q in %s", *tankID, *cfgPath)}
	}
	p, err := buildPlan(*ct)
	if err != nil {
		return err
	}
	// The tank's own history, when the state file has one: its baseline K,
	// and the transmitter as its recent drains show it.
	var k, fitNoise, fitRho float64
	var from string
	var nFits int
	if st := openIfExists(cfg, *statePath); st != nil {
		k, from = baselineK(st, ct.ID)
		fitNoise, fitRho, nFits = recentNoise(st, ct.ID, samp.Seconds())
		st.Close()
	}
	switch {
	case k > 0:
	case ct.Detection.DesignKM25s > 0:
		k, from = ct.Detection.DesignKM25s, "detection.design_k"
	case ct.Outlet.DiameterM > 0 && ct.Outlet.DesignCd > 0:
		k = ct.Outlet.DesignCd * math.Pi * ct.Outlet.DiameterM * ct.Outlet.DiameterM / 4 * math.Sqrt(2*model.StandardGravity)
		from = fmt.Sprintf("the %.0f mm bore with Cd %.2f", 1000*ct.Outlet.DiameterM, ct.Outlet.DesignCd)
	default:
		return fmt.Errorf("plan-test: tank %s: no K to plan with: no baseline yet, and neither detection.design_k nor outlet diameter and design_cd", ct.ID)
	}
	// Where no flag says otherwise, the transmitter as the recent drains
	// show it.
	noiseFrom, rhoFrom := "--noise", "--rho"
	if noiseM == 0 {
		noiseM, noiseFrom = 0.002, "the default"
		if nFits > 0 {
			noiseM, noiseFrom = fitNoise, fmt.Sprintf("the median of the last %d fits", nFits)
		}
	}
	if *rho < 0 {
		*rho, rhoFrom = 0, "white"
		if nFits > 0 {
			*rho, rhoFrom = fitRho, fmt.Sprintf("the last %d fits", nFits)
		}
	}
	maxHead := p.Tank.Shape.HeightM() - p.Tank.OutletElevM
	rows, best, err := model.PlanDrainTest(&p.Tank, model.PlanOptions{KM25s: k, NoiseM: noiseM, SampleS: samp.Seconds(), Rho: *rho, Target: target, MaxHeadM: maxHead})
	if err != nil {
		return err
	}
	w := e.stdout
	fmt.Fprintf(w, "Drain test for %s: K %.4g m^2.5/s (from %s), noise %.1f mm (%s), sampling %v, rho %.2f (%s); wanted %.2f %%.\n\n",
		ct.ID, k, from, 1000*noiseM, noiseFrom, samp, *rho, rhoFrom, 100*target)
	fmt.Fprintln(w, "| start head m | end head m | duration | samples | rel. SE of K, datum known | datum fitted |")
	fmt.Fprintln(w, "|---|---|---|---|---|---|")
	for _, r := range rows {
		fmt.Fprintf(w, "| %.2f | %.2f | %v | %d | %.3f %% | %.3f %% |\n", r.StartHeadM, r.EndHeadM,
			time.Duration(r.DurationS*float64(time.Second)).Round(time.Second), r.Samples, 100*r.RelSE, 100*r.RelSEDatum)
	}
	fmt.Fprintln(w)
	if best != nil {
		lo, hi := k*(1-1.96*best.RelSEDatum), k*(1+1.96*best.RelSEDatum)
		fmt.Fprintf(w, "Recommended: fill to %.2f m above the outlet and let it run to %.2f m (%v, %d samples): K to %.3f %% (95 %% interval about %.4g to %.4g m^2.5/s).\n",
			best.StartHeadM, best.EndHeadM, time.Duration(best.DurationS*float64(time.Second)).Round(time.Second), best.Samples, 100*best.RelSEDatum, lo, hi)
	} else {
		top := rows[len(rows)-1] // from full to empty: the most precise
		for _, r := range rows {
			if r.RelSEDatum < top.RelSEDatum {
				top = r
			}
		}
		ratio := top.RelSEDatum / target
		fmt.Fprintf(w, "No test in this tank reaches %.2f %%: the best, from %.2f m to empty, gives %.3f %%. It would take sampling every %v (the SE falls as the square root of the interval) or a transmitter with %.2f mm of noise.\n",
			100*target, top.StartHeadM, 100*top.RelSEDatum, time.Duration(samp.Seconds()/(ratio*ratio)*float64(time.Second)).Round(10*time.Millisecond), 1000*noiseM/ratio)
	}
	fmt.Fprintln(w, "\nFilling and draining for a test is work on the plant: follow your site's procedures, local codes and licensed practice.")
	return nil
}

// openIfExists opens the state file if there is one (nil otherwise, or
// when it cannot be opened: the plan then goes without the history).
func openIfExists(cfg *config.Config, statePath string) *store.Store {
	if statePath == "" {
		statePath = cfg.Outputs.StateFile
	}
	if _, err := os.Stat(statePath); err != nil {
		return nil
	}
	st, err := store.Open(statePath, time.Second)
	if err != nil {
		return nil
	}
	return st
}

// baselineK returns the tank's baseline K from the state file, if it has
// one (0 otherwise), and where it came from.
func baselineK(st *store.Store, tank string) (float64, string) {
	blob, err := st.DetectorState(tank)
	if err != nil || blob == nil {
		return 0, ""
	}
	var s scan.SavedState
	if err := scan.DecodeState(blob, &s); err != nil || s.Detector == nil || !s.Detector.Ref.Set {
		return 0, ""
	}
	return s.Detector.Ref.KM25s, "the tank's baseline"
}

// recentNoise is the median reading noise and lag-1 residual correlation of
// the tank's last 10 fits, the correlation moved to the plan's sampling
// interval (ρ^(Δplan/Δfit), an AR(1) in continuous time); n is 0 when
// there are none.
func recentNoise(st *store.Store, tank string, sampleS float64) (noiseM, rho float64, n int) {
	fits, err := st.Fits(tank, 0, math.MaxInt64)
	if err != nil || len(fits) == 0 {
		return 0, 0, 0
	}
	fits = fits[max(0, len(fits)-10):]
	var sig, rh []float64
	for _, f := range fits {
		if f.SigmaM > 0 {
			sig = append(sig, f.SigmaM)
		}
		r := 0.0
		if f.ResidualRho > 0 && f.N > 1 && f.EndNs > f.StartNs {
			dt := float64(f.EndNs-f.StartNs) / 1e9 / float64(f.N-1)
			r = math.Pow(math.Min(f.ResidualRho, 0.999), sampleS/dt)
		}
		rh = append(rh, r)
	}
	if len(sig) == 0 {
		return 0, 0, 0
	}
	slices.Sort(sig)
	slices.Sort(rh)
	return sig[len(sig)/2], math.Min(rh[len(rh)/2], 0.99), len(fits)
}
