package store

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"reflect"
	"strconv"
)

// encodeFlat marshals a flat struct (such as model.Fit) to a JSON object keyed
// by the Go field names. Non-finite float64 fields become the strings "NaN",
// "+Inf" or "-Inf"; other fields use encoding/json. Fields added to the struct
// later are picked up without changes here.
func encodeFlat(v any) ([]byte, error) {
	rv := reflect.ValueOf(v)
	if rv.Kind() == reflect.Pointer {
		rv = rv.Elem()
	}
	if rv.Kind() != reflect.Struct {
		panic(fmt.Sprintf("store: encodeFlat of %T, want a struct", v))
	}
	rt := rv.Type()
	var buf bytes.Buffer
	buf.WriteByte('{')
	first := true
	for i := range rt.NumField() {
		f := rt.Field(i)
		if !f.IsExported() {
			continue
		}
		if !first {
			buf.WriteByte(',')
		}
		first = false
		name, _ := json.Marshal(f.Name)
		buf.Write(name)
		buf.WriteByte(':')
		fv := rv.Field(i)
		if fv.Kind() == reflect.Float64 || fv.Kind() == reflect.Float32 {
			x := fv.Float()
			switch {
			case math.IsNaN(x):
				buf.WriteString(`"NaN"`)
				continue
			case math.IsInf(x, 1):
				buf.WriteString(`"+Inf"`)
				continue
			case math.IsInf(x, -1):
				buf.WriteString(`"-Inf"`)
				continue
			}
		}
		b, err := json.Marshal(fv.Interface())
		if err != nil {
			return nil, fmt.Errorf("store: encode %s.%s: %w", rt.Name(), f.Name, err)
		}
		buf.Write(b)
	}
	buf.WriteByte('}')
	return buf.Bytes(), nil
}

// decodeFlat is the inverse of encodeFlat: ptr must point to a struct. Keys
// that name no field are ignored and missing keys leave the field unchanged,
// so records written by an older or newer build still load.
func decodeFlat(data []byte, ptr any) error {
	rv := reflect.ValueOf(ptr)
	if rv.Kind() != reflect.Pointer || rv.Elem().Kind() != reflect.Struct {
		panic(fmt.Sprintf("store: decodeFlat into %T, want a pointer to a struct", ptr))
	}
	rv = rv.Elem()
	rt := rv.Type()
	var raw map[string]json.RawMessage
	if err := json.Unmarshal(data, &raw); err != nil {
		return fmt.Errorf("store: decode %s: %w", rt.Name(), err)
	}
	if raw == nil {
		return fmt.Errorf("store: decode %s: not a JSON object", rt.Name())
	}
	for i := range rt.NumField() {
		f := rt.Field(i)
		if !f.IsExported() {
			continue
		}
		msg, ok := raw[f.Name]
		if !ok {
			continue
		}
		fv := rv.Field(i)
		if (fv.Kind() == reflect.Float64 || fv.Kind() == reflect.Float32) && len(msg) > 0 && msg[0] == '"' {
			var s string
			if err := json.Unmarshal(msg, &s); err != nil {
				return fmt.Errorf("store: decode %s.%s: %w", rt.Name(), f.Name, err)
			}
			x, err := strconv.ParseFloat(s, 64)
			if err != nil || !(math.IsNaN(x) || math.IsInf(x, 0)) {
				return fmt.Errorf("store: decode %s.%s: string %q is not NaN or ±Inf", rt.Name(), f.Name, s)
			}
			fv.SetFloat(x)
			continue
		}
		if err := json.Unmarshal(msg, fv.Addr().Interface()); err != nil {
			return fmt.Errorf("store: decode %s.%s: %w", rt.Name(), f.Name, err)
		}
	}
	return nil
}
