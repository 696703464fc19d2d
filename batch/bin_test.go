package batch

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"testing"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/onboard"
)

func TestParseBin(t *testing.T) {
	parts, err := ParseBin([]byte(`{"format": "scanfold.bin", "version": 1, "parts": [
  {"name": "bracket", "sweep": "sweeps/bracket"},
  {"name": "valve", "sweep": "/data/valve", "reference": "cad/valve.stl", "reference_unit": "1mm", "rests": "as-scanned"}
]}`))
	if err != nil {
		t.Fatal(err)
	}
	want := []Part{
		{Name: "bracket", Sweep: "sweeps/bracket", ReferenceUnit: 1},
		// units.ParseLength divides by 1000: "1mm" is the float64 nearest 0.001.
		{Name: "valve", Sweep: "/data/valve", Reference: "cad/valve.stl", ReferenceUnit: 0.001, Rests: "as-scanned"},
	}
	if !reflect.DeepEqual(parts, want) {
		t.Errorf("got %+v\nwant %+v", parts, want)
	}

	// Each invalid file gives an error naming the line or the part and
	// field.
	for _, tc := range []struct{ name, data, want string }{
		{"empty", ``, "empty or truncated JSON"},
		{"syntax", "{\n  \"parts\": [\n    {\"name\": \"a\",, }\n  ]\n}", "bin.json:3: JSON syntax error"},
		{"type", `{"parts": {"name": "a"}}`, "object where a []batch.partWire was expected"},
		{"unknown field", `{"parts": [{"name": "a", "sweep": "s", "colour": 1}]}`, `unknown field "colour"`},
		{"trailing", "{\"parts\": [{\"name\": \"a\", \"sweep\": \"s\"}]}\n{}", "bin.json:2: unexpected data after the JSON value"},
		{"format", `{"format": "other", "parts": [{"name": "a", "sweep": "s"}]}`, `format: "other", want "scanfold.bin"`},
		{"version", `{"version": 2, "parts": [{"name": "a", "sweep": "s"}]}`, "version: 2 is not supported"},
		{"no parts", `{"parts": []}`, "parts: missing or empty"},
		{"bad name", `{"parts": [{"name": "../a", "sweep": "s"}]}`, "parts[0].name:"},
		{"case duplicate", `{"parts": [{"name": "Nut", "sweep": "a"}, {"name": "nut", "sweep": "b"}]}`, `parts[1].name: "nut" is parts[0]'s name too`},
		{"no sweep", `{"parts": [{"name": "a"}]}`, "parts[0].sweep: missing"},
		{"bad unit", `{"parts": [{"name": "a", "sweep": "s", "reference": "r.stl", "reference_unit": "1 inch"}]}`, "parts[0].reference_unit"},
		{"negative unit", `{"parts": [{"name": "a", "sweep": "s", "reference": "r.stl", "reference_unit": "-1mm"}]}`, "parts[0].reference_unit"},
		{"rests", `{"parts": [{"name": "a", "sweep": "s", "rests": "upside-down"}]}`, "parts[0].rests"},
		{"unit alone", `{"parts": [{"name": "a", "sweep": "s", "reference_unit": "1mm"}]}`, "given without a reference"},
	} {
		_, err := ParseBin([]byte(tc.data))
		var be *BinError
		if !errors.As(err, &be) || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: err = %v, want a *BinError containing %q", tc.name, err, tc.want)
		}
	}

	// More parts than MaxParts: refused before anything is built.
	var b strings.Builder
	b.WriteString(`{"parts": [`)
	for i := 0; i <= MaxParts; i++ {
		if i > 0 {
			b.WriteString(",")
		}
		b.WriteString(`{"name": "p", "sweep": "s"}`)
	}
	b.WriteString("]}")
	if _, err := ParseBin([]byte(b.String())); err == nil || !strings.Contains(err.Error(), "at most") {
		t.Errorf("%d parts: err = %v", MaxParts+1, err)
	}
}

func TestReadBin(t *testing.T) {
	dir := t.TempDir()
	for _, d := range []string{"valve", "bracket", ".scanfold-batch", "catalog", "Nut"} {
		if err := os.Mkdir(filepath.Join(dir, d), 0o755); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.WriteFile(filepath.Join(dir, "notes.txt"), []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	parts, err := ReadBin(dir, filepath.Join(dir, "catalog"))
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, p := range parts {
		names = append(names, p.Name)
		if p.Sweep != filepath.Join(dir, p.Name) {
			t.Errorf("%s: sweep %s", p.Name, p.Sweep)
		}
	}
	// Byte order: upper case before lower case.
	if want := []string{"Nut", "bracket", "valve"}; !reflect.DeepEqual(names, want) {
		t.Errorf("parts %v, want %v (dot folders, files and the skipped catalog left out)", names, want)
	}

	// bin.json wins, and its relative paths are taken from the bin.
	list := map[string]any{"parts": []map[string]string{{"name": "v", "sweep": "valve", "reference": "/abs/v.stl"}}}
	data, _ := json.Marshal(list)
	if err := os.WriteFile(filepath.Join(dir, BinFile), data, 0o644); err != nil {
		t.Fatal(err)
	}
	parts, err = ReadBin(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(parts) != 1 || parts[0].Sweep != filepath.Join(dir, "valve") || parts[0].Reference != filepath.FromSlash("/abs/v.stl") {
		t.Errorf("bin.json parts %+v", parts)
	}
	os.WriteFile(filepath.Join(dir, BinFile), []byte(`{"parts": [}`), 0o644)
	if _, err := ReadBin(dir); err == nil || !strings.Contains(err.Error(), filepath.Join(dir, BinFile)) {
		t.Errorf("bad bin.json: err = %v, want the file's path", err)
	}

	empty := t.TempDir()
	if _, err := ReadBin(empty); err == nil || !strings.Contains(err.Error(), "nothing to onboard") {
		t.Errorf("empty bin: err = %v", err)
	}
	if _, err := ReadBin(filepath.Join(empty, "missing")); err == nil {
		t.Error("missing bin: no error")
	}
}

func TestParseSummary(t *testing.T) {
	s := &Summary{Format: SummaryFormat, Version: SummaryVersion, State: StateFinished,
		Parts: []PartResult{{Name: "a", Status: StatusFiled, Verdict: "ready", Revision: 2}, {Name: "b", Status: StatusFailed, Error: "x"}}}
	s.Count()
	data, _ := json.Marshal(s)
	got, err := ParseSummary(data)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, s) {
		t.Errorf("round trip: %+v", got)
	}
	if s.Counts.Ready != 1 || s.Counts.Failed != 1 || s.Counts.Filed != 1 {
		t.Errorf("counts %+v", s.Counts)
	}
	for _, tc := range []struct{ data, want string }{
		{`{"format": "scanfold.batch-summary", "version": 2}`, "version 2"},
		{`{"format": "x", "version": 1}`, `format "x"`},
		{`{"format": "scanfold.batch-summary", "version": 1, "parts": [{"status": "filed"}]}`, "parts[0]: no name"},
		{`{"format": `, "truncated"},
	} {
		if _, err := ParseSummary([]byte(tc.data)); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: err = %v, want %q", tc.data, err, tc.want)
		}
	}
}

// FuzzParseBin: any input either parses into valid parts or gives a
// *BinError; it never panics.
func FuzzParseBin(f *testing.F) {
	f.Add([]byte(`{"parts": [{"name": "a", "sweep": "s"}]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		parts, err := ParseBin(data)
		if err != nil {
			var be *BinError
			if !errors.As(err, &be) {
				t.Fatalf("error %v is not a *BinError", err)
			}
			return
		}
		if len(parts) == 0 || len(parts) > MaxParts {
			t.Fatalf("%d parts", len(parts))
		}
		for _, p := range parts {
			if p.Name == "" || p.Sweep == "" || !(p.ReferenceUnit > 0) {
				t.Fatalf("invalid part %+v", p)
			}
		}
	})
}

// FuzzParseSummary: any input parses or gives an error; what parses
// marshals and parses again to the same summary.
func FuzzParseSummary(f *testing.F) {
	f.Add([]byte(`{"format": "scanfold.batch-summary", "version": 1, "parts": [{"name": "a", "status": "filed"}]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := ParseSummary(data)
		if err != nil {
			return
		}
		again, err := json.Marshal(s)
		if err != nil {
			t.Fatal(err)
		}
		s2, err := ParseSummary(again)
		if err != nil {
			t.Fatalf("re-parse: %v", err)
		}
		if !reflect.DeepEqual(s, s2) {
			t.Fatalf("round trip changed the summary")
		}
	})
}

// TestPartRests: a part's "rests" in bin.json overrides the run's
// setting for that part alone.
func TestPartRests(t *testing.T) {
	sweep := testSweep(t, "nut", 2, 1)
	dir := t.TempDir()
	bin := filepath.Join(dir, "bin")
	if err := os.MkdirAll(bin, 0o755); err != nil {
		t.Fatal(err)
	}
	list := fmt.Sprintf(`{"parts": [{"name": "tray", "sweep": %q, "rests": "as-scanned"}, {"name": "loose", "sweep": %q, "rests": "any"}, {"name": "plain", "sweep": %q}]}`, sweep, sweep, sweep)
	if err := os.WriteFile(filepath.Join(bin, BinFile), []byte(list), 0o644); err != nil {
		t.Fatal(err)
	}
	defer func(f func(context.Context, string, string, *catalog.Store, onboard.Options) (*onboard.Result, error)) {
		onboardFunc = f
	}(onboardFunc)
	var mu sync.Mutex
	got := map[string]bool{}
	onboardFunc = func(ctx context.Context, sweep, name string, store *catalog.Store, opt onboard.Options) (*onboard.Result, error) {
		mu.Lock()
		got[name] = opt.Check.RestsAsScanned
		mu.Unlock()
		return nil, errors.New("stand-in")
	}
	for _, runSetting := range []bool{false, true} {
		opt := quickOptions()
		opt.Onboard.Check.RestsAsScanned = runSetting
		opt.RetryFailed = true
		if _, err := Run(context.Background(), bin, openStore(t, filepath.Join(dir, "cat")), opt); err != nil {
			t.Fatal(err)
		}
		if want := map[string]bool{"tray": true, "loose": false, "plain": runSetting}; !reflect.DeepEqual(got, want) {
			t.Errorf("run setting %v: parts rest as scanned %v, want %v", runSetting, got, want)
		}
	}
}

// TestShortReasons: the table's reasons leave out ready remarks and
// put those that gave the verdict first.
func TestShortReasons(t *testing.T) {
	p := PartResult{Verdict: catalog.Rescan, Reasons: []string{"review: a", "ready: b", "rescan: c", "review: d", "rescan: e"}}
	if got, want := p.ShortReasons(), []string{"rescan: c", "rescan: e", "review: a", "review: d"}; !reflect.DeepEqual(got, want) {
		t.Errorf("got %q, want %q", got, want)
	}
}
