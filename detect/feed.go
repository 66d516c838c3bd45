package detect

import (
	"fmt"
	"math"
	"time"
)

// FeedState is what a tank's level feed is doing at one time. Data
// availability is the data path's condition, not the tank's: it is reported
// as the feed's own status, never as a Finding.
type FeedState string

const (
	// FeedNoData: no level sample has been seen yet.
	FeedNoData FeedState = "no_data"
	// FeedOK: the newest sample is at most Options.GapLimit old.
	FeedOK FeedState = "ok"
	// FeedGap: a gap is in progress: no sample for more than GapLimit, but
	// not yet for more than SilentLimit. Findings are withheld, not cleared.
	FeedGap FeedState = "gap"
	// FeedSilent: no sample for more than Options.SilentLimit. Findings are
	// withheld and a feed notice is due (once; another when it comes back).
	FeedSilent FeedState = "silent"
)

// feedWindow is the window of FeedStatus.MissingShare24h.
const feedWindow = 24 * time.Hour

// FeedStatus is the status of one tank's level feed at time At.
//
// The data horizon is At minus Options.ReadLag (data younger than the lag
// are not read yet, e.g. the InfluxDB settle delay); ages count from it.
// LastSample is the newest sample seen (zero with no data). While a gap is
// in progress (state gap or silent) SilentSince is the last sample and
// SilentForS the time since it, s; both are zero when the feed is ok.
// MissingShare24h is the share of the 24 h before the horizon not covered
// by samples: every stretch between consecutive samples longer than GapLimit
// (the whole stretch), and the gap in progress; GapsIn24h counts them.
// SilentLimitS is the notice limit used, s.
type FeedStatus struct {
	Tank            string    `json:"tank"`
	State           FeedState `json:"state"`
	At              time.Time `json:"at"`
	LastSample      time.Time `json:"last_sample,omitzero"`
	SilentSince     time.Time `json:"silent_since,omitzero"`
	SilentForS      float64   `json:"silent_for_s"`
	MissingShare24h float64   `json:"missing_share_24h"`
	GapsIn24h       int       `json:"gaps_in_24h"`
	SilentLimitS    float64   `json:"silent_limit_s"`
}

// Withholds tells whether the tank's findings are withheld at this status:
// while data are missing nothing is raised from too little data, and
// nothing is cleared either (the caller keeps the findings it had).
func (f FeedStatus) Withholds() bool { return f.State == FeedGap || f.State == FeedSilent }

// Feed returns the status of the tank's level feed at now, from the samples
// passed to AddSeries. It does not modify the state. A time before the
// newest sample is answered from the recorded gaps: inside one the gap was in
// progress with its first sample as the last one seen, elsewhere the feed was
// ok (the newest sample then is not known and LastSample is left zero).
func (s *State) Feed(now time.Time, opt Options) FeedStatus {
	opt = opt.withDefaults()
	ss := &s.Sensor
	out := FeedStatus{Tank: s.Tank, State: FeedNoData, At: now, SilentLimitS: opt.SilentLimit.Seconds()}
	if ss.LastSampleNs == 0 {
		return out
	}
	horizon := now.Add(-opt.ReadLag).UnixNano()
	last := ss.LastSampleNs
	if horizon < last {
		last = 0
		for i := len(ss.Gaps) - 1; i >= 0; i-- {
			if g := ss.Gaps[i]; g.StartNs <= horizon && horizon < g.EndNs {
				last = g.StartNs
				break
			}
		}
	}
	if last != 0 {
		out.LastSample = nsTime(last)
	}
	lo := horizon - int64(feedWindow)
	var lost int64
	for i := len(ss.Gaps) - 1; i >= 0; i-- {
		g := ss.Gaps[i]
		if g.EndNs <= lo {
			break
		}
		a, b := max(g.StartNs, lo), min(g.EndNs, horizon)
		if b > a {
			lost += b - a
			out.GapsIn24h++
		}
	}
	out.State = FeedOK
	if age := horizon - last; last != 0 && age > int64(opt.GapLimit) {
		out.State = FeedGap
		if age > int64(opt.SilentLimit) {
			out.State = FeedSilent
		}
		out.SilentSince, out.SilentForS = nsTime(last), time.Duration(age).Seconds()
		if last >= ss.LastSampleNs { // the gap in progress, not yet in Gaps
			lost += horizon - max(last, lo)
			out.GapsIn24h++
		}
	}
	out.MissingShare24h = min(1, float64(lost)/float64(feedWindow))
	return out
}

// GapsBetween returns the recorded gaps (stretches between consecutive
// samples longer than GapLimit) that overlap [from, to), oldest first.
func (s *State) GapsBetween(from, to time.Time) []Gap {
	var out []Gap
	for _, g := range s.Sensor.Gaps {
		if g.EndNs > from.UnixNano() && g.StartNs < to.UnixNano() {
			out = append(out, g)
		}
	}
	return out
}

// KindFeed is the kind of a feed notice: a level feed silent for longer
// than Options.SilentLimit. It is the data path's condition, never a tank
// finding; it is raised once and cleared as soon as samples come back.
const (
	KindFeed  = "feed"
	SubSilent = "silent"
)

// Notice returns the feed notice due at this status: one while the feed is
// silent, none otherwise.
func (f FeedStatus) Notice() (Finding, bool) {
	if f.State != FeedSilent {
		return Finding{}, false
	}
	return Finding{
		Tank: f.Tank, Kind: KindFeed, Subtype: SubSilent, DetectedAt: f.At, Onset: f.SilentSince,
		Statistic: "silent_h", Value: f.SilentForS / 3600, Threshold: f.SilentLimitS / 3600, PValue: math.NaN(),
		Evidence: fmt.Sprintf("no level sample for %.1f h (last at %s; notice limit %.1f h): check the transmitter, logger and data path; outlet findings are withheld until data return",
			f.SilentForS/3600, f.SilentSince.Format(time.RFC3339), f.SilentLimitS/3600),
	}, true
}
