package scan

import (
	"time"

	"drainsight/detect"
)

// Evaluation is one tank's active findings at one time.
type Evaluation struct {
	At       time.Time
	Findings []detect.Finding
	Feed     detect.FeedStatus
	// withheld: the tank's data were missing at this time, so only its
	// feed was evaluated (findings holds the feed notice, if one is due)
	// and its other findings are kept as they were.
	Withheld bool
}

// Evaluate is one tank's evaluation at at: its active findings or, while
// its data are missing, only its feed notice (detect.FeedStatus.Notice).
func Evaluate(det *detect.State, at time.Time, opt detect.Options) Evaluation {
	fs := det.Feed(at, opt)
	ev := Evaluation{At: at, Feed: fs}
	if fs.Withholds() {
		ev.Withheld = true
		if n, ok := fs.Notice(); ok {
			ev.Findings = []detect.Finding{n}
		}
		return ev
	}
	ev.Findings = det.Evaluate(at, opt)
	return ev
}

// EvalEvery is how often a pass evaluates the statistics while it replays
// history (at UTC midnights), so that faults that came and went between two
// passes (a stuck sensor, a data gap) are reported with their times.
const EvalEvery = 24 * time.Hour

// NextEval returns the first evaluation instant after tNs.
func NextEval(tNs int64) int64 {
	return (tNs/int64(EvalEvery) + 1) * int64(EvalEvery)
}
