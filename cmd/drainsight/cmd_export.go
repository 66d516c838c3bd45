package main

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"time"

	"drainsight/alert"
	"drainsight/config"
	"drainsight/scan"
)

const exportAbout = `Writes a tank's history from the state file, for trending in other tools:
every stored drain fit (--what fits, the fields of events.jsonl) or every
finding transition, new and cleared (--what findings, the fields of
findings.jsonl), of one tank (--tank) or all, between --since and --until,
as JSON lines or CSV (a header of the same field names). events.jsonl and
findings.jsonl list only what each scan added; export lists all that is
stored. Times are UTC (RFC 3339), K in m^2.5/s.`

func runExport(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "export", "export --config FILE [--tank ID] [--what fits|findings] [--format jsonl|csv] [--since T] [--until T] [--out FILE]", exportAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	statePath := fs.String("state", "", "state file (default: outputs.state_file of the config)")
	tankID := fs.String("tank", "", "tank id (default: every tank of the config)")
	what := fs.String("what", "fits", "fits or findings")
	format := fs.String("format", "jsonl", "jsonl or csv")
	since := fs.String("since", "", "start, RFC 3339 or YYYY-MM-DD (default: all)")
	until := fs.String("until", "", "end, exclusive (default: all)")
	outPath := fs.String("out", "", "output file (default: standard output)")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" {
		return &usageError{"export: --config is required"}
	}
	if *what != "fits" && *what != "findings" {
		return &usageError{fmt.Sprintf("export: --what %q: want fits or findings", *what)}
	}
	if *format != "jsonl" && *format != "csv" {
		return &usageError{fmt.Sprintf("export: --format %q: want jsonl or csv", *format)}
	}
	fromNs, toNs := int64(math.MinInt64), int64(math.MaxInt64)
	if *since != "" {
		t, err := parseWhen(*since)
		if err != nil {
			return &usageError{"export: --since: " + err.Error()}
		}
		fromNs = t.UnixNano()
	}
	if *until != "" {
		t, err := parseWhen(*until)
		if err != nil {
			return &usageError{"export: --until: " + err.Error()}
		}
		toNs = t.UnixNano()
	}
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	var tanks []string
	for _, t := range cfg.Tanks {
		if *tankID == "" || t.ID == *tankID {
			tanks = append(tanks, t.ID)
		}
	}
	if len(tanks) == 0 {
		return &usageError{fmt.Sprintf("export: --tank %q is not in %s", *tankID, cfg.File)}
	}
	slices.Sort(tanks) // by tank, then time, as events.jsonl
	path := *statePath
	if path == "" {
		path = cfg.Outputs.StateFile
	}
	st, err := openStore(path, false)
	if err != nil {
		return err
	}
	defer st.Close()
	var recs []any
	for _, id := range tanks {
		if *what == "fits" {
			fits, err := st.Fits(id, 0, math.MaxInt64)
			if err != nil {
				return err
			}
			for _, f := range fits {
				if f.EndNs >= fromNs && f.EndNs < toNs {
					recs = append(recs, toEventRecord(f))
				}
			}
			continue
		}
		hist, err := st.Transitions(id, fromNs, toNs)
		if err != nil {
			return err
		}
		for _, h := range hist {
			var ev alert.Event
			if err := scan.DecodeGob(h.Data, &ev); err != nil {
				return fmt.Errorf("tank %s: stored transition %s: %w", id, h.ID, err)
			}
			recs = append(recs, toFindingRecord(ev))
		}
	}
	w := e.stdout
	var f *os.File
	if *outPath != "" {
		if f, err = os.Create(*outPath); err != nil {
			return err
		}
		w = f
	}
	if *format == "csv" {
		var zero any = eventRecord{}
		if *what == "findings" {
			zero = findingRecord{}
		}
		err = writeCSV(w, zero, recs)
	} else {
		enc := json.NewEncoder(w)
		enc.SetEscapeHTML(false)
		for _, r := range recs {
			if err = enc.Encode(r); err != nil {
				break
			}
		}
	}
	if f != nil {
		if cerr := f.Close(); err == nil {
			err = cerr
		}
	}
	return err
}

// writeCSV writes records of one struct type as CSV: a header of the JSON
// field names of zero's type, in field order, then one row per record
// (times RFC 3339, absent values empty).
func writeCSV(w io.Writer, zero any, recs []any) error {
	typ := reflect.TypeOf(zero)
	var names []string
	var idx []int
	for i := range typ.NumField() {
		tag := strings.Split(typ.Field(i).Tag.Get("json"), ",")[0]
		if tag == "" || tag == "-" {
			continue
		}
		names, idx = append(names, tag), append(idx, i)
	}
	cw := csv.NewWriter(w)
	if err := cw.Write(names); err != nil {
		return err
	}
	row := make([]string, len(idx))
	for _, r := range recs {
		v := reflect.ValueOf(r)
		for j, i := range idx {
			row[j] = csvCell(v.Field(i))
		}
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

func csvCell(v reflect.Value) string {
	if v.Kind() == reflect.Pointer {
		if v.IsNil() {
			return ""
		}
		v = v.Elem()
	}
	switch x := v.Interface().(type) {
	case time.Time:
		return x.UTC().Format(time.RFC3339Nano)
	case float64:
		return strconv.FormatFloat(x, 'g', -1, 64)
	case string:
		return x
	case bool:
		return strconv.FormatBool(x)
	case int:
		return strconv.Itoa(x)
	}
	return fmt.Sprint(v.Interface())
}
