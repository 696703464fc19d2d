package reconstruct

import (
	"errors"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestManifestFixtures(t *testing.T) {
	files, err := filepath.Glob("testdata/manifests/*.json")
	if err != nil || len(files) == 0 {
		t.Fatalf("no fixtures: %v", err)
	}
	for _, f := range files {
		name := strings.TrimSuffix(filepath.Base(f), ".json")
		t.Run(name, func(t *testing.T) {
			data, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			m, err := ParseManifest(data)
			if strings.HasPrefix(name, "valid") {
				if err != nil {
					t.Fatalf("valid fixture: %v", err)
				}
				roundTrip(t, m)
				return
			}
			want, err2 := os.ReadFile(strings.TrimSuffix(f, ".json") + ".want")
			if err2 != nil {
				t.Fatal(err2)
			}
			w := strings.TrimSpace(string(want))
			if err == nil {
				t.Fatalf("parsed, want error %q", w)
			}
			if !strings.Contains(err.Error(), w) {
				t.Fatalf("error\n  %v\nwant it to contain\n  %s", err, w)
			}
			if !errors.Is(err, ErrInvalid) && !errors.Is(err, ErrUnsupported) {
				t.Errorf("error wraps neither ErrInvalid nor ErrUnsupported")
			}
		})
	}
}

func TestManifestValues(t *testing.T) {
	data, err := os.ReadFile("testdata/manifests/valid_turntable.json")
	if err != nil {
		t.Fatal(err)
	}
	m, err := ParseManifest(data)
	if err != nil {
		t.Fatal(err)
	}
	if m.Rig != RigTurntable || m.Intrinsics.Fx != 525 || m.DepthRange != (DepthRange{0.25, 1.5}) {
		t.Errorf("manifest = %+v", m)
	}
	// 10° in the file is π/18 rad in memory.
	if got := *m.Frames[1].Angle; math.Abs(got-math.Pi/18) > 1e-15 {
		t.Errorf("angle = %v rad, want π/18", got)
	}
	// The axis direction is normalised: (0, −0.866, −0.5) has norm
	// 0.99996, so its y becomes −0.866/0.99996.
	if a := m.Turntable.Axis; a == nil || math.Abs(a.Direction.Y+0.866/math.Hypot(0.866, 0.5)) > 1e-12 {
		t.Errorf("axis = %+v", m.Turntable.Axis)
	}
	for i, p := range m.FrameProblems() {
		if p != nil {
			t.Errorf("frame %d: %v", i, p)
		}
	}
}

func TestManifestDefaults(t *testing.T) {
	data, err := os.ReadFile("testdata/manifests/valid_handheld.json")
	if err != nil {
		t.Fatal(err)
	}
	m, err := ParseManifest(data)
	if err != nil {
		t.Fatal(err)
	}
	if m.DepthUnit != DefaultDepthUnit || m.DepthRange.Known() || m.Turntable != nil {
		t.Errorf("defaults: unit %v, range %v, turntable %v", m.DepthUnit, m.DepthRange, m.Turntable)
	}
	if m.Frames[1].CamToWorld != nil || len(m.Frames[2].CamToWorld) != 16 {
		t.Errorf("poses: %v, %v", m.Frames[1].CamToWorld, m.Frames[2].CamToWorld)
	}
}

// roundTrip checks that Encode then ParseManifest gives back m, with
// angles equal to 12 significant digits of degrees (Encode's rounding).
func roundTrip(t *testing.T, m *Manifest) {
	t.Helper()
	b, err := m.Encode()
	if err != nil {
		t.Fatalf("encode: %v", err)
	}
	m2, err := ParseManifest(b)
	if err != nil {
		t.Fatalf("reparse: %v\n%s", err, b)
	}
	if len(m.Frames) != len(m2.Frames) {
		t.Fatalf("frames %d → %d", len(m.Frames), len(m2.Frames))
	}
	for i := range m.Frames {
		a, b := m.Frames[i].Angle, m2.Frames[i].Angle
		if (a == nil) != (b == nil) {
			t.Fatalf("frame %d: angle presence changed", i)
		}
		if a != nil {
			if *a != *b && !(math.Abs(*a-*b) <= 1e-11*math.Abs(*a)) {
				t.Fatalf("frame %d: angle %v → %v", i, *a, *b)
			}
			m2.Frames[i].Angle = a
		}
	}
	if !reflect.DeepEqual(m, m2) {
		t.Fatalf("round trip changed the manifest:\n%+v\n%+v", m, m2)
	}
}
