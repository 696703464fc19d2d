package reconstruct

import (
	"bytes"
	"encoding/json"
	"fmt"
	"reflect"
	"strings"
)

// checkKeys walks the JSON document and reports object keys that
// encoding/json would accept but that are not exactly the format's:
// keys differing only in case ("Depth" for "depth"; encoding/json
// matches case-insensitively) and keys repeated in one object (where
// encoding/json silently keeps the last). It runs after decodeStrict
// has accepted the document, so unknown keys and syntax errors are
// already reported.
func checkKeys(data []byte, p *problems) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	walkValue(dec, reflect.TypeFor[manifestWire](), "", p)
}

// frameType stands in for the json.RawMessage elements of "frames".
var frameType = reflect.TypeFor[frameWire]()

func walkValue(dec *json.Decoder, t reflect.Type, path string, p *problems) bool {
	for t != nil && t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	tok, err := dec.Token()
	if err != nil {
		return false
	}
	d, ok := tok.(json.Delim)
	if !ok {
		return true
	}
	switch d {
	case '{':
		var fields map[string]reflect.Type
		if t != nil && t.Kind() == reflect.Struct {
			fields = jsonFields(t)
		}
		seen := map[string]bool{}
		for dec.More() {
			kt, err := dec.Token()
			if err != nil {
				return false
			}
			key, _ := kt.(string)
			field := joinPath(path, key)
			if seen[key] {
				p.add(field, ErrInvalid, "appears twice in one object")
			}
			seen[key] = true
			var ft reflect.Type
			if fields != nil {
				var exact bool
				ft, exact = fields[key]
				if !exact {
					for name, typ := range fields {
						if strings.EqualFold(name, key) {
							p.add(field, ErrInvalid, "unknown field %q; field names are case-sensitive, did you mean %q?", clip(key), name)
							ft = typ
							break
						}
					}
				}
				if path == "" && key == "frames" {
					ft = reflect.SliceOf(frameType)
				}
			}
			if !walkValue(dec, ft, field, p) {
				return false
			}
		}
	case '[':
		var et reflect.Type
		if t != nil && t.Kind() == reflect.Slice {
			et = t.Elem()
		}
		for i := 0; dec.More(); i++ {
			if !walkValue(dec, et, fmt.Sprintf("%s[%d]", path, i), p) {
				return false
			}
		}
	}
	_, err = dec.Token() // the closing delimiter
	return err == nil
}

func joinPath(path, key string) string {
	if path == "" {
		return clip(key)
	}
	return path + "." + clip(key)
}

// jsonFields maps a wire struct's JSON names to field types.
func jsonFields(t reflect.Type) map[string]reflect.Type {
	out := make(map[string]reflect.Type, t.NumField())
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
		if name == "" || name == "-" {
			continue
		}
		out[name] = f.Type
	}
	return out
}
