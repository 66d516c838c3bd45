package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"drainsight/ingest"
	"drainsight/model"
	"drainsight/scan"
)

// checkSample is how much of each file tank's history check segments to
// see whether the settings let any fall through.
const checkSample = 14 * 24 * time.Hour

// warnRejectAll segments the first checkSample of each file tank's data
// with the tank's settings (the history taken as complete) and writes a
// warning for every tank where falls were seen and every one was
// rejected: a setting (a minimum duration or drop, say) that no drain of
// this tank can meet. Read errors are left to scan, which reports them.
func warnRejectAll(ctx context.Context, w io.Writer, plans []*plan, recv map[string]*plan) {
	var files []*plan
	for _, p := range plans {
		if p.cfg.Source.Format != "influx" {
			files = append(files, p)
		}
	}
	for i, ft := range fileTanks(recv, files) {
		p := files[i]
		if ft.Out.Err != nil {
			continue
		}
		src := ft.Src
		// A tank in cascade is segmented on the head across its outlet,
		// as scan does: the receiving tank's level from its own files.
		var recv *model.ReceivingLevel
		if src.Into != "" {
			if src.IntoSrc == nil {
				continue
			}
			lv, _, err := scan.ReadReceiver(ctx, src.Into, *src.IntoSrc)
			if err != nil {
				continue
			}
			lv.OutletAboveM = src.OutletAboveM
			recv = lv
		}
		opt := src.Read
		seg := model.NewSegmenter(&p.Tank, p.Segment)
		cctx, cancel := context.WithCancel(ctx)
		first := int64(0)
		_, err := ingest.StreamSeries(cctx, src.Paths, src.Format, opt, map[string]ingest.Conversion{p.cfg.ID: p.conv}, scan.FileChunk, func(c *model.Series) {
			if c.Tank != p.cfg.ID || c.Len() == 0 {
				return
			}
			if first == 0 {
				first = c.TimeNs[0]
			}
			n := c.Len()
			for n > 0 && c.TimeNs[n-1] >= first+int64(checkSample) {
				n--
			}
			var q []float64
			if c.InflowM3s != nil {
				q = c.InflowM3s[:n]
			}
			if recv != nil {
				seg.PushSubmerged(c.TimeNs[:n], c.HeadM[:n], q, recv.At(c.TimeNs[:n]))
			} else {
				seg.Push(c.TimeNs[:n], c.HeadM[:n], q)
			}
			if n < c.Len() {
				cancel()
			}
		})
		cancel()
		if err != nil && !errors.Is(err, context.Canceled) {
			continue
		}
		seg.FlushFinal()
		falls := seg.TakeFalls()
		st := seg.Stats()
		if st.Falls == 0 || st.Drains > 0 {
			continue
		}
		var longest time.Duration
		largest := 0.0
		for _, f := range falls {
			longest = max(longest, time.Duration(f.EndNs-f.StartNs))
			largest = max(largest, f.DropM)
		}
		var why []string
		for _, r := range []struct {
			n    int
			what string
		}{
			{st.RejectedShort, "too short"}, {st.RejectedSmall, "too small"}, {st.RejectedFew, "too few samples"},
			{st.RejectedTransient, "transient only"}, {st.RejectedInflow, "inflow"},
		} {
			if r.n > 0 {
				why = append(why, fmt.Sprintf("%d %s", r.n, r.what))
			}
		}
		fmt.Fprintf(w, "warning: tank %s: the settings reject all %d falls in the first %.0f days of data (%s); "+
			"the longest lasted %s and the largest fell %.3f m (detection.min_drain_duration %s, detection.min_drop %.3f m)\n",
			p.cfg.ID, st.Falls, checkSample.Hours()/24, strings.Join(why, ", "), longest.Round(time.Second), largest,
			minDuration(p.Segment), p.Segment.MinDropM)
	}
}

func minDuration(o model.SegmentOptions) time.Duration {
	if o.MinDuration == 0 {
		return 2 * time.Minute
	}
	return o.MinDuration
}
