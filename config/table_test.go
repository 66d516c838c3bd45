package config

import (
	"strings"
	"testing"
)

func TestReadTable(t *testing.T) {
	strap := [2]column{{name: "level", units: lengthUnits}, {name: "volume", units: volumeUnits}}
	raw := [2]column{{name: "reading", label: "mA"}, {name: "level", units: lengthUnits}}
	tests := []struct {
		name  string
		cols  [2]column
		data  string
		rows  []tableRow
		probs []string // each must be contained in the problem of the same index
	}{
		{"mm and L", strap, "level_mm,volume_L\n0,0\n500,900\n", []tableRow{{0, 0, 2}, {0.5, 0.9, 3}}, nil},
		// 1 US gal = 3.785411784e-3 m^3 (NIST SP 811 B.8): 100 US gal = 0.3785411784 m^3 (computed).
		{"ft and US gal", strap, "# site survey\nlevel_ft, volume_US_gal\n1,100\n", []tableRow{{0.3048, 0.3785411784, 3}}, nil},
		{"byte order mark and CRLF", strap, "\ufefflevel_m,volume_m3\r\n1,2\r\n", []tableRow{{1, 2, 2}}, nil},
		{"bbl", strap, "level_m,volume_bbl\n1,10\n", []tableRow{{1, 1.58987294928, 2}}, nil},
		{"raw with label", raw, "reading_mA,level_m\n4,0\n20,3.2\n", []tableRow{{4, 0, 2}, {20, 3.2, 3}}, nil},
		{"raw without label", raw, "reading,level_cm\n4,0\n20,320\n", []tableRow{{4, 0, 2}, {20, 3.2, 3}}, nil},
		{"empty", strap, "", nil, []string{"t.csv: no header line (header must be level_<unit>,volume_<unit>; level units: cm, ft, in, km, m, mm; volume units: L, US gal, US_gal, bbl, cm3"}},
		{"bare header", strap, "level,volume\n0,0\n", nil, []string{`t.csv:1: header "level,volume": header must be level_<unit>,volume_<unit>; level units: cm, ft, in, km, m, mm; volume units: L, US gal, US_gal, bbl, cm3, cm^3, cm³, ft3, ft^3, ft³, imp gal, imp_gal, l, m3, mL, m^3, m³`}},
		{"unknown volume unit", strap, "level_m,volume_gal\n", nil, []string{`t.csv:1: header "level_m,volume_gal": header must be`}},
		{"wrong reading label", raw, "reading_V,level_m\n", nil, []string{`t.csv:1: header "reading_V,level_m": header must be reading or reading_mA,level_<unit>; level units: cm, ft, in, km, m, mm`}},
		{"header after comments", strap, "# a\n# b\nlevel_q,volume_L\n", nil, []string{`t.csv:3: header`}},
		{"three header fields", strap, "level_m,volume_L,x\n", nil, []string{"t.csv:1: wrong number of fields (header must be"}},
		{"bad rows", strap, "level_m,volume_L\n0,0\n1,abc\n2\n3 m,4\n5,6\n", []tableRow{{0, 0, 2}, {5, 0.006, 6}},
			[]string{"t.csv:3: want two plain numbers (level, volume)", "t.csv:4: wrong number of fields", "t.csv:5: want two plain numbers"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rows, probs := readTable([]byte(tc.data), "t.csv", tc.cols)
			if len(rows) != len(tc.rows) {
				t.Fatalf("rows = %v, want %v (problems %q)", rows, tc.rows, probs)
			}
			for i := range rows {
				w := tc.rows[i]
				if rows[i].line != w.line || !near(rows[i].a, w.a) || !near(rows[i].b, w.b) {
					t.Errorf("row %d = %v, want %v", i, rows[i], w)
				}
			}
			if len(probs) != len(tc.probs) {
				t.Fatalf("problems = %q, want %d", probs, len(tc.probs))
			}
			for i, p := range probs {
				if !strings.Contains(p, tc.probs[i]) {
					t.Errorf("problem %d = %q, want it to contain %q", i, p, tc.probs[i])
				}
			}
		})
	}
}

func near(a, b float64) bool {
	d := a - b
	if d < 0 {
		d = -d
	}
	return d <= 1e-12*max(1, a, -a)
}
