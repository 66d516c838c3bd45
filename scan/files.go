package scan

import (
	"context"
	"fmt"
	"log/slog"
	"slices"
	"sync"
	"time"

	"drainsight/ingest"
	"drainsight/model"
	"drainsight/store"
)

// FileSource says where and how one tank's samples are read from files.
type FileSource struct {
	Paths  []string
	Format ingest.Format
	// Read holds the precision, measurement, field, tank tag and inflow
	// field (Tanks and callbacks are set by ReadFiles).
	Read ingest.ReadOptions
	Conv ingest.Conversion
	// Into is the tank or level the outlet discharges into ("": none),
	// IntoSrc how its files are read (its level above its bottom) and
	// OutletAboveM the outlet's height above that bottom, m.
	Into         string
	IntoSrc      *FileSource
	OutletAboveM float64
}

// FileTank is one tank of a pass over files: what to read, its run and
// what it gave. A tank whose Out.Err is set before ReadFiles is not read.
type FileTank struct {
	Plan *Plan
	Src  FileSource
	Run  *Run
	Out  Outcome
}

// FileChunk is how many samples of one tank the file reader hands on at a
// time: memory stays bounded whatever the length of the files.
const FileChunk = 1 << 15

// ReceiverMaxGap is the shortest interval of a receiving tank's samples not
// interpolated across (or four of its usual intervals, if longer).
const ReceiverMaxGap = 10 * time.Minute

// ReadFiles opens every tank's run (from its checkpoint) and reads every
// file once, grouped by identical source settings, streaming each tank's
// samples up to limitNs into its run; the runs are not committed (Finish
// does). A tank whose files fail to read is marked failed and nothing of it
// will be committed. It returns the merged report of the files and the time
// of the newest sample (0 when none).
func ReadFiles(ctx context.Context, st *store.Store, log *slog.Logger, tanks []*FileTank, limitNs int64) (ingest.Report, int64) {
	type group struct {
		src   FileSource
		conv  map[string]ingest.Conversion
		tanks []*FileTank
	}
	groups := map[string]*group{}
	var order []string
	byID := make(map[string]*FileTank, len(tanks))
	for _, ft := range tanks {
		if ft.Out.Tank == "" {
			ft.Out.Tank = ft.Plan.ID
		}
		if ft.Out.Err != nil {
			continue
		}
		run, from, err := Open(st, ft.Plan, log)
		if err != nil {
			ft.Out.Err = err
			continue
		}
		run.FromNs, run.LimitNs = from, limitNs
		ft.Run = run
		byID[ft.Plan.ID] = ft
		s := ft.Src
		key := fmt.Sprintf("%d|%q|%s|%s|%s|%d|%s", s.Format, s.Paths, s.Read.Measurement, s.Read.Field, s.Read.TankTag, s.Read.Precision, s.Read.InflowField)
		g, ok := groups[key]
		if !ok {
			g = &group{src: s, conv: map[string]ingest.Conversion{}}
			groups[key] = g
			order = append(order, key)
		}
		g.conv[ft.Plan.ID] = s.Conv
		g.tanks = append(g.tanks, ft)
	}
	rep := linkReceivers(ctx, tanks)
	// The reader parses on this goroutine while FileWorkers goroutines
	// segment and fit: each tank is fed by one worker, its chunks in order,
	// so every run sees exactly the sequence it would see alone.
	feeds := make([]chan *model.Series, FileWorkers)
	var wg sync.WaitGroup
	for i := range feeds {
		feeds[i] = make(chan *model.Series, 4)
		wg.Add(1)
		go func(ch <-chan *model.Series) {
			defer wg.Done()
			for c := range ch {
				byID[c.Tank].Run.Feed(c)
			}
		}(feeds[i])
	}
	worker := map[string]int{}
	var newest int64
	var failed []error
	for _, key := range order {
		g := groups[key]
		r, err := ingest.StreamSeries(ctx, g.src.Paths, g.src.Format, g.src.Read, g.conv, FileChunk, func(c *model.Series) {
			if n := c.Len(); n > 0 {
				newest = max(newest, c.TimeNs[n-1])
			}
			if ft := byID[c.Tank]; ft != nil && ft.Run != nil {
				w, ok := worker[c.Tank]
				if !ok {
					w = len(worker) % len(feeds)
					worker[c.Tank] = w
				}
				feeds[w] <- c
			}
		})
		rep.Merge(r)
		failed = append(failed, err)
	}
	for _, ch := range feeds {
		close(ch)
	}
	wg.Wait()
	for i, key := range order {
		if err := failed[i]; err != nil {
			for _, ft := range groups[key].tanks {
				ft.Out.Err = err
			}
		}
	}
	return rep, newest
}

// FileWorkers is how many goroutines segment and fit the tanks of a file
// pass beside the one that reads and parses.
const FileWorkers = 2

// PastSettle reports whether now is past the tank's last sample of this
// pass by more than its settle delay (no sample: false).
func (f *FileTank) PastSettle(now time.Time) bool {
	if f.Run == nil || f.Run.Total == 0 {
		return false
	}
	settle := f.Run.P.Segment.Settle
	if settle == 0 {
		settle = model.DefaultSettle
	}
	return now.UnixNano()-f.Run.LastNs > int64(max(settle, 0))
}

// Finish commits the tank (unless it failed) and evaluates it at now; with
// complete set the tank's history is taken as complete.
func (f *FileTank) Finish(now time.Time, complete bool) Outcome {
	o := f.Out
	if o.Err != nil || f.Run == nil {
		return o
	}
	f.Run.Complete = complete
	o.Fits, o.Err = f.Run.Commit(true, now.UnixNano())
	o.Collect(f.Run)
	if o.Err == nil {
		o.Finish(f.Run, now)
	}
	return o
}

// linkReceivers gives every tank whose outlet discharges into another tank
// or a level that one's level history, read once per receiver from its own
// files (level above its bottom), for the head across the outlet. A tank
// whose receiving level cannot be read fails (nothing of it is committed).
// It returns the report of the levels' files (a receiving tank's are
// reported by its own read).
func linkReceivers(ctx context.Context, tanks []*FileTank) ingest.Report {
	var rep ingest.Report
	isTank := map[string]bool{}
	for _, ft := range tanks {
		isTank[ft.Plan.ID] = true
	}
	levels := map[string]*model.ReceivingLevel{}
	failed := map[string]error{}
	for _, ft := range tanks {
		if ft.Run == nil || ft.Src.Into == "" {
			continue
		}
		into := ft.Src.Into
		if ft.Src.IntoSrc == nil {
			ft.Out.Err = fmt.Errorf("outlet.discharges_into: no tank or level %q", into)
			continue
		}
		lv, err := levels[into], failed[into]
		if lv == nil && err == nil {
			var r ingest.Report
			if lv, r, err = ReadReceiver(ctx, into, *ft.Src.IntoSrc); err != nil {
				failed[into] = err
			} else {
				levels[into] = lv
			}
			if !isTank[into] {
				rep.Merge(r)
			}
		}
		if err != nil {
			ft.Out.Err = fmt.Errorf("the level of %s, which the outlet discharges into: %w", into, err)
			continue
		}
		r := *lv
		r.OutletAboveM = ft.Src.OutletAboveM
		ft.Run.Recv = &r
	}
	return rep
}

// ReadReceiver reads the level above its bottom of id, a tank or a level
// that outlets discharge into, from its files src, with the report of
// those files.
func ReadReceiver(ctx context.Context, id string, src FileSource) (*model.ReceivingLevel, ingest.Report, error) {
	conv := src.Conv
	conv.OutletElevM, conv.InflowToSI = 0, 0
	conv.MinHeadM, conv.MaxHeadM = conv.MinHeadM+src.Conv.OutletElevM, conv.MaxHeadM+src.Conv.OutletElevM
	opt := src.Read
	opt.InflowField = ""
	all, rep, err := ingest.ReadSeries(ctx, src.Paths, src.Format, opt, map[string]ingest.Conversion{id: conv})
	if err != nil {
		return nil, rep, err
	}
	r := &model.ReceivingLevel{MaxGapNs: int64(ReceiverMaxGap)}
	if s := all[id]; s != nil {
		r.TimeNs, r.LevelM = s.TimeNs, s.HeadM
		if n := s.Len(); n > 1 {
			dts := make([]int64, n-1)
			for i := range dts {
				dts[i] = s.TimeNs[i+1] - s.TimeNs[i]
			}
			slices.Sort(dts)
			r.MaxGapNs = max(r.MaxGapNs, 4*dts[len(dts)/2])
		}
	}
	return r, rep, nil
}
