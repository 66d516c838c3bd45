// Package report writes the weekly outlet-health report for maintenance
// planners: per tank, the outlet constant against its baseline, the drain
// time now and at baseline, the forecast date of the maintenance threshold,
// the active findings with their evidence, and the fleet watch list ranked by
// evidence with the false discovery rate controlled (Benjamini-Hochberg),
// and each tank's level feed (ok, in a gap or silent, and the data gaps of
// the week) apart from the findings: data availability is the data path's
// condition, never a tank finding.
//
// It renders Markdown (for mail and tickets) and a self-contained HTML page
// with one small inline SVG trend per tank. Rendering is pure: the caller
// passes everything, including the time.
package report

import (
	"fmt"
	"html/template"
	"io"
	"math"
	"slices"
	"strings"
	"time"

	"drainsight/alert"
	"drainsight/detect"
	"drainsight/model"
)

// Tank is one tank's part of the report.
type Tank struct {
	ID, Site, Description string
	// BaselineKM25s is the reference K (0 while the baseline is learned).
	BaselineKM25s float64
	// Fits are the tank's drains in the report's trend window, oldest first;
	// only grades A and B with a finite K are shown.
	Fits []model.Fit
	// Findings are the tank's active findings (new or ongoing). A feed
	// notice among them (kind detect.KindFeed) is shown with the feed, not
	// as a finding.
	Findings []alert.Record
	// Forecast is the trend forecast of the first outlet finding, or the
	// detector's own when none is active; nil when there is no trend.
	Forecast *detect.Forecast
	// Rank is the tank's place in the fleet view.
	Rank detect.FleetRank
	// LastSample is the newest level sample seen.
	LastSample time.Time
	// Feed is the tank's level feed at the last scan (State "" when none
	// is known); Gaps are the data gaps that overlap the reporting week.
	Feed detect.FeedStatus
	Gaps []detect.Gap
	// Work is the tank's maintenance on record that the report shows
	// (oldest first): the records of the trend window and the one that
	// started the current baseline.
	Work []Work
}

// Work is one maintenance record. For an accepted commissioning test
// (Action "commissioned") Until is the end of the test window and KM25s
// with [KLo95M25s, KHi95M25s] its K (m^2.5/s) and 95 % interval from
// Drains drains; zero otherwise.
type Work struct {
	At                          time.Time
	Action, Note                string
	Until                       time.Time
	Drains                      int
	KM25s, KLo95M25s, KHi95M25s float64
}

// Text is the record in words, without its date.
func (w Work) Text() string {
	s := w.Action
	if w.Action == "commissioned" && w.KM25s > 0 {
		s = fmt.Sprintf("commissioning test to %s accepted as the starting baseline: K %s (95 %% CI %s–%s) from %d drains",
			w.Until.UTC().Format("2006-01-02 15:04"), kText(w.KM25s), kText(w.KLo95M25s), kText(w.KHi95M25s), w.Drains)
	}
	if w.Note != "" {
		s += "; " + w.Note
	}
	return s
}

// Input is everything the report shows.
type Input struct {
	Site        string
	Now         time.Time
	PeriodStart time.Time // start of the reporting week
	Tanks       []Tank    // in fleet-rank order
	FDR         float64   // false discovery rate of the watch list
}

// row is the derived summary of a tank for the templates.
type row struct {
	Tank
	LatestK, LatestLo, LatestHi float64
	ChangePct                   float64
	DrainsInPeriod              int
	Status                      string
	DrainNow, DrainBase         string
	ForecastText                string
	Trend                       template.HTML
	// The feed: its state in words, the gaps of the week, the longest,
	// and the share of the week without samples.
	FeedText, LastSampleText string
	GapsInPeriod             int
	LongestGap, MissingText  string
	FeedNotice               bool
}

func summarize(in Input) []row {
	rows := make([]row, 0, len(in.Tanks))
	for _, t := range in.Tanks {
		t.Fits = usable(t.Fits)
		var findings []alert.Record
		notice := false
		for _, rec := range t.Findings {
			if rec.Finding.Kind == detect.KindFeed {
				notice = true
				continue
			}
			findings = append(findings, rec)
		}
		t.Findings = findings
		r := row{Tank: t, ChangePct: math.NaN(), FeedNotice: notice}
		r.feed(in)
		for _, f := range t.Fits {
			if f.EndNs >= in.PeriodStart.UnixNano() {
				r.DrainsInPeriod++
			}
		}
		if n := len(t.Fits); n > 0 {
			last := t.Fits[n-1]
			r.LatestK, r.LatestLo, r.LatestHi = last.KM25s, last.KLo95M25s, last.KHi95M25s
			if t.BaselineKM25s > 0 {
				r.ChangePct = 100 * (last.KM25s/t.BaselineKM25s - 1)
			}
		}
		switch {
		case len(t.Findings) > 0:
			r.Status = "ACTION"
		case t.Feed.State == detect.FeedSilent:
			r.Status = "feed silent"
		case t.Rank.Watch:
			r.Status = "watch"
		case t.BaselineKM25s == 0:
			r.Status = "learning baseline"
		default:
			r.Status = "ok"
		}
		r.DrainNow, r.DrainBase = "-", "-"
		if fc := t.Forecast; fc != nil {
			r.DrainNow, r.DrainBase = duration(fc.DrainTimeNowS), duration(fc.DrainTimeBaselineS)
			switch {
			case fc.Reached:
				r.ForecastText = "below the maintenance threshold now"
			case !fc.Date.IsZero():
				r.ForecastText = "threshold about " + fc.Date.Format("2006-01-02")
				if !fc.DateLo.IsZero() {
					hi := "later"
					if !fc.DateHi.IsZero() {
						hi = fc.DateHi.Format("2006-01-02")
					}
					r.ForecastText += fmt.Sprintf(" (95 %%: %s to %s)", fc.DateLo.Format("2006-01-02"), hi)
				}
			}
		}
		r.Trend = sparkline(t.Fits, t.BaselineKM25s)
		rows = append(rows, r)
	}
	return rows
}

// feed fills the row's feed columns: the state at the last scan, the gaps
// that overlap the week [PeriodStart, Now] (the gap in progress at the last
// scan included) and the share of the week they cover.
func (r *row) feed(in Input) {
	f := r.Feed
	r.FeedText, r.LastSampleText, r.LongestGap, r.MissingText = "-", "-", "-", "-"
	if !f.LastSample.IsZero() {
		r.LastSampleText = f.LastSample.UTC().Format("2006-01-02 15:04")
	}
	switch f.State {
	case "":
		return
	case detect.FeedGap, detect.FeedSilent:
		r.FeedText = fmt.Sprintf("%s for %.1f h", f.State, f.SilentForS/3600)
		if r.FeedNotice {
			r.FeedText += " (notice sent)"
		}
	default:
		r.FeedText = string(f.State)
	}
	lo, hi := in.PeriodStart.UnixNano(), in.Now.UnixNano()
	gaps := slices.Clone(r.Gaps)
	if f.State == detect.FeedGap || f.State == detect.FeedSilent {
		gaps = append(gaps, detect.Gap{StartNs: f.SilentSince.UnixNano(), EndNs: f.At.UnixNano()})
	}
	var lost, longest int64
	for _, g := range gaps {
		a, b := max(g.StartNs, lo), min(g.EndNs, hi)
		if b <= a {
			continue
		}
		r.GapsInPeriod++
		lost += b - a
		longest = max(longest, g.EndNs-g.StartNs)
	}
	if longest > 0 {
		r.LongestGap = fmt.Sprintf("%.1f h", time.Duration(longest).Hours())
	}
	if hi > lo {
		r.MissingText = fmt.Sprintf("%.1f %%", 100*float64(lost)/float64(hi-lo))
	}
}

// usable keeps the fits that detection uses: grade A or B, finite K > 0.
func usable(fits []model.Fit) []model.Fit {
	var out []model.Fit
	for _, f := range fits {
		if (f.Quality == model.QualityA || f.Quality == model.QualityB) && f.KM25s > 0 && !math.IsInf(f.KM25s, 0) {
			out = append(out, f)
		}
	}
	return out
}

func duration(s float64) string {
	if !(s > 0) || math.IsInf(s, 0) {
		return "-"
	}
	return (time.Duration(s) * time.Second).Round(time.Second).String()
}

func kText(k float64) string {
	if !(k > 0) {
		return "-"
	}
	return fmt.Sprintf("%.4g", k)
}

func pct(x float64) string {
	if math.IsNaN(x) {
		return "-"
	}
	return fmt.Sprintf("%+.1f %%", x)
}

// Markdown writes the report as Markdown.
func Markdown(w io.Writer, in Input) error {
	rows := summarize(in)
	var b strings.Builder
	fmt.Fprintf(&b, "# Outlet-health report: %s\n\n", in.Site)
	fmt.Fprintf(&b, "Week %s to %s (UTC). K is the outlet constant of q = K·sqrt(h) in m^2.5/s; "+
		"the change is the latest drain against the tank's own baseline.\n\n",
		in.PeriodStart.UTC().Format("2006-01-02"), in.Now.UTC().Format("2006-01-02 15:04"))
	fmt.Fprintf(&b, "> %s\n\n", alert.Caution)
	b.WriteString("| tank | status | drains this week | baseline K | latest K (95 % CI) | change | drain time now / baseline | forecast | evidence q |\n")
	b.WriteString("|---|---|---|---|---|---|---|---|---|\n")
	for _, r := range rows {
		ci := "-"
		if r.LatestK > 0 {
			ci = fmt.Sprintf("%s (%s–%s)", kText(r.LatestK), kText(r.LatestLo), kText(r.LatestHi))
		}
		fc := r.ForecastText
		if fc == "" {
			fc = "-"
		}
		fmt.Fprintf(&b, "| %s | %s | %d | %s | %s | %s | %s / %s | %s | %s |\n", r.ID, r.Status, r.DrainsInPeriod,
			kText(r.BaselineKM25s), ci, pct(r.ChangePct), r.DrainNow, r.DrainBase, fc, qText(r.Rank))
	}
	var watch []string
	for _, r := range rows {
		if r.Rank.Watch {
			watch = append(watch, r.ID)
		}
	}
	fmt.Fprintf(&b, "\nWatch list (Benjamini–Hochberg, false discovery rate %.0f %%): %s\n", 100*in.FDR, listOrNone(watch))
	b.WriteString("\n## Findings\n\n")
	any := false
	for _, r := range rows {
		for _, rec := range r.Findings {
			any = true
			f := rec.Finding
			kind := f.Kind
			if f.Subtype != "" {
				kind += " (" + f.Subtype + ")"
			}
			fmt.Fprintf(&b, "- **%s: %s**, %s since %s", r.ID, kind, rec.Status, rec.FirstSeen.UTC().Format("2006-01-02"))
			if !f.Onset.IsZero() {
				fmt.Fprintf(&b, "; onset about %s", f.Onset.UTC().Format("2006-01-02"))
			}
			if f.MagnitudePct != 0 && !math.IsNaN(f.MagnitudePct) {
				fmt.Fprintf(&b, "; change %s", pct(f.MagnitudePct))
			}
			fmt.Fprintf(&b, ". %s\n", f.Evidence)
		}
	}
	if !any {
		b.WriteString("No active findings.\n")
	}
	b.WriteString("\nRestriction: the outlet passes less than at baseline (fouling, scaling, a blockage or a valve not fully open). " +
		"Excess outflow: it passes more (erosion, a leak downstream). Tank leak: the level falls while the outlet is shut. " +
		"Sensor fault: the level reading itself is suspect; outlet findings are withheld while it lasts.\n")
	b.WriteString("\n## Maintenance on record\n\n")
	anyWork := false
	for _, r := range rows {
		for _, w := range r.Work {
			if !anyWork {
				b.WriteString("| tank | date | work |\n|---|---|---|\n")
				anyWork = true
			}
			fmt.Fprintf(&b, "| %s | %s | %s |\n", r.ID, w.At.UTC().Format("2006-01-02"), w.Text())
		}
	}
	if !anyWork {
		b.WriteString("None in the trend window.\n")
	}
	b.WriteString("\n## Data feeds\n\n" + feedNote + "\n\n")
	b.WriteString("| tank | feed at the last scan | last sample | gaps this week | longest gap | without samples this week |\n")
	b.WriteString("|---|---|---|---|---|---|\n")
	for _, r := range rows {
		fmt.Fprintf(&b, "| %s | %s | %s | %d | %s | %s |\n", r.ID, r.FeedText, r.LastSampleText, r.GapsInPeriod, r.LongestGap, r.MissingText)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// feedNote says what the feed table is.
const feedNote = "A data gap (15 min or more without a sample) is the data path's condition, not the tank's, and never a finding: " +
	"while a tank's data are missing its findings are withheld, neither raised nor cleared. " +
	"A feed silent longer than its limit (detection.feed_silent_limit, default 4 h) gets one notice, and one when it is back."

// qText shows a tank's q-value; "-" when the tank was not ranked.
func qText(r detect.FleetRank) string {
	if r.Tank == "" || math.IsNaN(r.QValue) {
		return "-"
	}
	if r.QValue == 0 {
		return "0" // below the smallest float64
	}
	return fmt.Sprintf("%.2g", r.QValue)
}

func listOrNone(s []string) string {
	if len(s) == 0 {
		return "none"
	}
	return strings.Join(s, ", ")
}

// sparkline draws K per drain against the baseline as a small SVG.
func sparkline(fits []model.Fit, base float64) template.HTML {
	if len(fits) < 2 {
		return ""
	}
	const w, h = 240.0, 48.0
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, f := range fits {
		lo, hi = math.Min(lo, f.KM25s), math.Max(hi, f.KM25s)
	}
	if base > 0 {
		lo, hi = math.Min(lo, base*0.75), math.Max(hi, base*1.1)
	}
	if hi <= lo {
		hi = lo + 1e-12
	}
	t0, t1 := float64(fits[0].EndNs), float64(fits[len(fits)-1].EndNs)
	if t1 <= t0 {
		t1 = t0 + 1
	}
	x := func(t int64) float64 { return 2 + (w-4)*(float64(t)-t0)/(t1-t0) }
	y := func(k float64) float64 { return h - 2 - (h-4)*(k-lo)/(hi-lo) }
	var b strings.Builder
	fmt.Fprintf(&b, `<svg xmlns="http://www.w3.org/2000/svg" width="%g" height="%g" viewBox="0 0 %g %g" role="img" aria-label="outlet constant per drain">`, w, h, w, h)
	if base > 0 {
		fmt.Fprintf(&b, `<line x1="0" x2="%g" y1="%.1f" y2="%.1f" stroke="#888" stroke-dasharray="3 3"/>`, w, y(base), y(base))
		fmt.Fprintf(&b, `<line x1="0" x2="%g" y1="%.1f" y2="%.1f" stroke="#c60" stroke-dasharray="1 3"/>`, w, y(0.8*base), y(0.8*base))
	}
	b.WriteString(`<polyline fill="none" stroke="#246" stroke-width="1.2" points="`)
	for _, f := range fits {
		fmt.Fprintf(&b, "%.1f,%.1f ", x(f.EndNs), y(f.KM25s))
	}
	b.WriteString(`"/></svg>`)
	return template.HTML(b.String())
}

var page = template.Must(template.New("report").Funcs(template.FuncMap{
	"k": kText, "pct": pct, "q": qText,
	"day": func(t time.Time) string { return t.UTC().Format("2006-01-02") },
}).Parse(`<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>Outlet-health report: {{.In.Site}}</title>
<style>
body{font:14px/1.4 system-ui,sans-serif;margin:1.5em;color:#222;max-width:80em}
table{border-collapse:collapse}td,th{border-bottom:1px solid #ddd;padding:.3em .6em;text-align:left;vertical-align:middle}
.caution{border-left:4px solid #c60;padding:.4em .8em;background:#fff6ee}
.s-ACTION{font-weight:bold;color:#a00}.s-watch{color:#a60}
</style></head><body>
<h1>Outlet-health report: {{.In.Site}}</h1>
<p>Week {{day .In.PeriodStart}} to {{day .In.Now}} (UTC). K is the outlet constant of q = K·sqrt(h) in m<sup>2.5</sup>/s;
the dashed line is the tank's baseline, the dotted one the maintenance threshold.</p>
<p class="caution">{{.Caution}}</p>
<table><tr><th>tank</th><th>status</th><th>drains this week</th><th>baseline K</th><th>latest K (95 % CI)</th><th>change</th><th>drain time now / baseline</th><th>forecast</th><th>K per drain</th></tr>
{{range .Rows}}<tr><td title="{{.Description}}">{{.ID}}</td><td class="s-{{.Status}}">{{.Status}}</td><td>{{.DrainsInPeriod}}</td><td>{{k .BaselineKM25s}}</td>
<td>{{k .LatestK}} ({{k .LatestLo}}–{{k .LatestHi}})</td><td>{{pct .ChangePct}}</td><td>{{.DrainNow}} / {{.DrainBase}}</td><td>{{.ForecastText}}</td><td>{{.Trend}}</td></tr>
{{end}}</table>
<h2>Findings</h2>
<ul>{{range .Rows}}{{$id := .ID}}{{range .Findings}}<li><b>{{$id}}: {{.Finding.Kind}}{{if .Finding.Subtype}} ({{.Finding.Subtype}}){{end}}</b>, {{.Status}} since {{day .FirstSeen}}. {{.Finding.Evidence}}</li>
{{end}}{{end}}</ul>
<h2>Maintenance on record</h2>
{{if .AnyWork}}<table><tr><th>tank</th><th>date</th><th>work</th></tr>
{{range .Rows}}{{$id := .ID}}{{range .Work}}<tr><td>{{$id}}</td><td>{{day .At}}</td><td>{{.Text}}</td></tr>
{{end}}{{end}}</table>{{else}}<p>None in the trend window.</p>{{end}}
<h2>Data feeds</h2>
<p>{{.FeedNote}}</p>
<table><tr><th>tank</th><th>feed at the last scan</th><th>last sample</th><th>gaps this week</th><th>longest gap</th><th>without samples this week</th></tr>
{{range .Rows}}<tr><td>{{.ID}}</td><td>{{.FeedText}}</td><td>{{.LastSampleText}}</td><td>{{.GapsInPeriod}}</td><td>{{.LongestGap}}</td><td>{{.MissingText}}</td></tr>
{{end}}</table>
</body></html>
`))

// HTML writes the report as one self-contained HTML page.
func HTML(w io.Writer, in Input) error {
	rows := summarize(in)
	anyWork := false
	for _, r := range rows {
		anyWork = anyWork || len(r.Work) > 0
	}
	return page.Execute(w, struct {
		In       Input
		Rows     []row
		Caution  string
		FeedNote string
		AnyWork  bool
	}{in, rows, alert.Caution, feedNote, anyWork})
}
