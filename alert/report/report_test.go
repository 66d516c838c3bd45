package report

import (
	"bytes"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"drainsight/alert"
	"drainsight/detect"
	"drainsight/model"
)

var update = flag.Bool("update", false, "rewrite golden files")

var now = time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)

func fits(k0, slopePerDay float64, n int) []model.Fit {
	var out []model.Fit
	for i := range n {
		end := now.Add(time.Duration(i-n) * 24 * time.Hour)
		k := k0 * (1 + slopePerDay*float64(i))
		out = append(out, model.Fit{EndNs: end.UnixNano(), KM25s: k, KLo95M25s: k * 0.99, KHi95M25s: k * 1.01, Quality: model.QualityA})
	}
	return out
}

func input() Input {
	restr := detect.Finding{Tank: "wash-2", Kind: "restriction", Subtype: "gradual", MagnitudePct: -18,
		Onset: now.Add(-20 * 24 * time.Hour), Evidence: "K fell 18 % from baseline"}
	// basin-4 has been silent for 12 h at the last scan (the notice went
	// out 4 h in) and had a 30 min gap earlier in the week.
	silent := detect.FeedStatus{Tank: "basin-4", State: detect.FeedSilent, At: now, LastSample: now.Add(-12 * time.Hour),
		SilentSince: now.Add(-12 * time.Hour), SilentForS: 12 * 3600, SilentLimitS: 4 * 3600}
	notice, _ := silent.Notice()
	fc := &detect.Forecast{Date: now.Add(10 * 24 * time.Hour), DateLo: now.Add(6 * 24 * time.Hour),
		DateHi: now.Add(18 * 24 * time.Hour), DrainTimeNowS: 1464, DrainTimeBaselineS: 1200}
	return Input{
		Site: "Invented test works", Now: now, PeriodStart: now.Add(-7 * 24 * time.Hour), FDR: 0.05,
		Tanks: []Tank{
			{ID: "wash-2", BaselineKM25s: 0.02, Fits: fits(0.02, -0.01, 20), Forecast: fc,
				Findings: []alert.Record{{Status: alert.StatusNew, FirstSeen: now, Finding: restr}},
				Rank:     detect.FleetRank{Tank: "wash-2", QValue: 0.001, Watch: true}},
			{ID: "sump-1", BaselineKM25s: 0.01, Fits: fits(0.01, 0, 20), Rank: detect.FleetRank{Tank: "sump-1", QValue: 0.9},
				Feed: detect.FeedStatus{State: detect.FeedOK, At: now, LastSample: now.Add(-time.Minute)},
				Gaps: []detect.Gap{{StartNs: now.Add(-50 * time.Hour).UnixNano(), EndNs: now.Add(-44 * time.Hour).UnixNano()}}},
			{ID: "basin-4", BaselineKM25s: 0.03, Fits: fits(0.03, 0, 20), Rank: detect.FleetRank{Tank: "basin-4", QValue: 0.9},
				Findings: []alert.Record{{Status: alert.StatusOngoing, FirstSeen: now.Add(-6 * time.Hour), Finding: notice}},
				Feed:     silent, Gaps: []detect.Gap{{StartNs: now.Add(-100 * time.Hour).UnixNano(), EndNs: now.Add(-99*time.Hour - 30*time.Minute).UnixNano()}}},
			{ID: "new-3", Work: []Work{{At: now.Add(-9 * 24 * time.Hour), Action: "commissioned", Until: now.Add(-9*24*time.Hour + 3*time.Hour),
				Drains: 2, KM25s: 0.0124, KLo95M25s: 0.01236, KHi95M25s: 0.01244, Note: "new bottom valve"}}},
		},
	}
}

func TestReportSkipsRejectedDrains(t *testing.T) {
	in := input()
	bad := model.Fit{EndNs: now.UnixNano(), KM25s: 0.001, Quality: model.QualityReject}
	in.Tanks[1].Fits = append(in.Tanks[1].Fits, bad)
	var md bytes.Buffer
	if err := Markdown(&md, in); err != nil {
		t.Fatal(err)
	}
	// sump-1's latest usable drain is at its baseline: change +0.0 %, not -90 %.
	if !strings.Contains(md.String(), "| sump-1 | ok | 7 | 0.01 | 0.01 (0.0099–0.0101) | +0.0 % |") {
		t.Errorf("a rejected drain leaked into the report:\n%s", md.String())
	}
}

func TestMarkdownGolden(t *testing.T) {
	var buf bytes.Buffer
	if err := Markdown(&buf, input()); err != nil {
		t.Fatal(err)
	}
	golden := filepath.Join("testdata", "report.md.golden")
	if *update {
		os.WriteFile(golden, buf.Bytes(), 0o644)
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	if got := buf.String(); got != string(want) {
		t.Errorf("report differs from %s (-update to accept):\n%s", golden, got)
	}
}

func TestReportContents(t *testing.T) {
	var md, html bytes.Buffer
	if err := Markdown(&md, input()); err != nil {
		t.Fatal(err)
	}
	if err := HTML(&html, input()); err != nil {
		t.Fatal(err)
	}
	for _, doc := range []string{md.String(), html.String()} {
		for _, want := range []string{"Caution: draining, flushing or entering a tank", "local codes and licensed practice", "wash-2", "ACTION", "gradual", "2026-03-12"} {
			if !strings.Contains(doc, want) {
				t.Errorf("report lacks %q", want)
			}
		}
	}
	// 19 days at -1 %/day: the latest K is 19 % below baseline.
	if !strings.Contains(md.String(), "-19.0 %") {
		t.Errorf("change column wrong:\n%s", md.String())
	}
	if !strings.Contains(md.String(), "learning baseline") {
		t.Errorf("a tank without baseline is not shown as learning")
	}
	if !strings.Contains(html.String(), "<svg") {
		t.Errorf("html has no trend chart")
	}
}

// The feed table: each tank's feed at the last scan, the gaps of the week
// (the one in progress included) and the share of the week without samples;
// a feed notice is shown with its feed, never as a finding, and a silent
// feed is not an action on the tank. Shares computed by hand: sump-1 6 h
// of 168 h = 3.6 %; basin-4 30 min + 12 h of 168 h = 7.4 %.
func TestReportFeeds(t *testing.T) {
	var md, html bytes.Buffer
	if err := Markdown(&md, input()); err != nil {
		t.Fatal(err)
	}
	if err := HTML(&html, input()); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{
		"| sump-1 | ok | 2026-03-02 05:59 | 1 | 6.0 h | 3.6 % |",
		"| basin-4 | silent for 12.0 h (notice sent) | 2026-03-01 18:00 | 2 | 12.0 h | 7.4 % |",
		"| new-3 | - | - | 0 | - | - |",
		"| basin-4 | feed silent |",
	} {
		if !strings.Contains(md.String(), want) {
			t.Errorf("markdown lacks %q:\n%s", want, md.String())
		}
	}
	findings := md.String()[strings.Index(md.String(), "## Findings"):strings.Index(md.String(), "## Data feeds")]
	if strings.Contains(findings, "basin-4") || strings.Contains(findings, "feed") {
		t.Errorf("a feed notice is listed as a finding:\n%s", findings)
	}
	for _, want := range []string{"<h2>Data feeds</h2>", "<td>basin-4</td><td>silent for 12.0 h (notice sent)</td>", "<td>7.4 %</td>"} {
		if !strings.Contains(html.String(), want) {
			t.Errorf("html lacks %q", want)
		}
	}
}
