package reconstruct

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"image"
	"image/color"
	"image/png"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// testSweep describes a small sweep written by writeTestSweep.
type testSweep struct {
	m      *Manifest
	depths [][]float32
	colors []*image.NRGBA
}

// newTestSweep makes a valid n-frame sweep of w×h pixels with seeded
// random depth (0.3–1.2 m, some holes) and colour.
func newTestSweep(rig Rig, n, w, h int, seed uint64) *testSweep {
	rng := rand.New(rand.NewPCG(seed, 1))
	k := mesh.Intrinsics{Width: w, Height: h, Fx: 50, Fy: 50, Cx: float64(w-1) / 2, Cy: float64(h-1) / 2}
	m := &Manifest{Version: ManifestVersion, Rig: rig, Intrinsics: k, DepthUnit: DefaultDepthUnit,
		DepthRange: DepthRange{Near: 0.2, Far: 2}, Provenance: map[string]string{"device": "test", "note": "unit test"}}
	if rig == RigTurntable {
		m.Turntable = &Turntable{AngleSign: 1}
	}
	ts := &testSweep{m: m}
	for i := 0; i < n; i++ {
		e := FrameEntry{Color: fmt.Sprintf("color/%04d.png", i), Depth: fmt.Sprintf("depth/%04d.png", i)}
		t := float64(i) / 30
		e.Time = &t
		if rig == RigTurntable {
			a := float64(i) * 2 * math.Pi / float64(n)
			e.Angle = &a
		} else {
			p := mesh.PoseFromAxisAngle(r3.Vec{X: rng.Float64() - 0.5, Y: 1, Z: 0.2}, rng.Float64()*6, r3.Vec{X: rng.Float64(), Y: rng.Float64(), Z: rng.Float64()})
			mat := p.Mat4()
			e.CamToWorld = mat[:]
		}
		m.Frames = append(m.Frames, e)
		d := make([]float32, w*h)
		for j := range d {
			if rng.IntN(10) > 0 {
				d[j] = float32(0.3 + 0.9*rng.Float64())
			}
		}
		c := image.NewNRGBA(image.Rect(0, 0, w, h))
		for j := 0; j < len(c.Pix); j += 4 {
			c.Pix[j], c.Pix[j+1], c.Pix[j+2], c.Pix[j+3] = uint8(rng.IntN(256)), uint8(rng.IntN(256)), uint8(rng.IntN(256)), 255
		}
		ts.depths = append(ts.depths, d)
		ts.colors = append(ts.colors, c)
	}
	return ts
}

func (ts *testSweep) write(t testing.TB, dir string) {
	t.Helper()
	for i, e := range ts.m.Frames {
		var db, cb bytes.Buffer
		if _, err := render.WriteDepthPNG(&db, ts.depths[i], ts.m.Intrinsics.Width, ts.m.Intrinsics.Height, ts.m.DepthUnit); err != nil {
			t.Fatal(err)
		}
		if err := render.WriteColorPNG(&cb, ts.colors[i]); err != nil {
			t.Fatal(err)
		}
		writeFile(t, dir, e.Depth, db.Bytes())
		writeFile(t, dir, e.Color, cb.Bytes())
	}
	b, err := ts.m.Encode()
	if err != nil {
		t.Fatal(err)
	}
	writeFile(t, dir, ManifestName, b)
}

func writeFile(t testing.TB, dir, name string, data []byte) {
	t.Helper()
	p := filepath.Join(dir, filepath.FromSlash(name))
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
}

func TestSweepRoundTrip(t *testing.T) {
	for _, rig := range []Rig{RigTurntable, RigHandheld} {
		t.Run(string(rig), func(t *testing.T) {
			ts := newTestSweep(rig, 4, 24, 16, 7)
			dir := t.TempDir()
			ts.write(t, dir)
			s, err := LoadSweepWith(context.Background(), dir, LoadOptions{Strict: true, CheckPixels: true})
			if err != nil {
				t.Fatal(err)
			}
			if got, want := len(s.Usable()), 4; got != want {
				t.Fatalf("usable frames = %d, want %d", got, want)
			}
			if s.Manifest.Provenance["device"] != "test" {
				t.Errorf("provenance = %v", s.Manifest.Provenance)
			}
			for i := 0; i < 4; i++ {
				f, err := s.Frame(i)
				if err != nil {
					t.Fatal(err)
				}
				// Depth is stored in whole counts of 1 mm, rounded to the
				// nearest: the round trip error is at most half a count
				// (plus float32 rounding of the metres, < 1e-7 m).
				const tol = 0.5e-3 + 1e-6
				for j, want := range ts.depths[i] {
					if d := math.Abs(float64(f.Depth[j] - want)); d > tol {
						t.Fatalf("frame %d pixel %d: depth %v, want %v ± %v", i, j, f.Depth[j], want, tol)
					}
				}
				if !bytes.Equal(f.Color.Pix, ts.colors[i].Pix) {
					t.Fatalf("frame %d: colour differs after the round trip", i)
				}
				im := f.DepthImage()
				if err := im.check(); err != nil {
					t.Fatal(err)
				}
				last := len(f.Depth) - 1
				if got, want := im.Color[3*last:3*last+3], ts.colors[i].Pix[4*last:4*last+3]; !bytes.Equal(got, want) {
					t.Errorf("frame %d: DepthImage colour of the last pixel %v, want %v", i, got, want)
				}
				e := ts.m.Frames[i]
				if !f.HasTime || f.Time != *e.Time {
					t.Errorf("frame %d: time %v (%v), want %v", i, f.Time, f.HasTime, *e.Time)
				}
				if rig == RigTurntable {
					// Angles go through 12 significant digits of degrees.
					if !f.HasAngle || math.Abs(f.Angle-*e.Angle) > 1e-10 {
						t.Errorf("frame %d: angle %v, want %v", i, f.Angle, *e.Angle)
					}
					if f.HasPose {
						t.Errorf("frame %d: pose without a calibrated axis", i)
					}
				} else {
					got := f.CamToWorld.Mat4()
					for j := range got {
						// Written with the shortest exact representation;
						// Orthonormalize then moves entries by rounding only.
						if math.Abs(got[j]-e.CamToWorld[j]) > 1e-12 {
							t.Fatalf("frame %d: pose entry %d = %v, want %v", i, j, got[j], e.CamToWorld[j])
						}
					}
				}
			}
		})
	}
}

// TestTurntablePoseFromAxis checks that a calibrated turntable sweep
// gives every frame the pose TurntablePose predicts, and that a
// point of the part maps back onto itself.
func TestTurntablePoseFromAxis(t *testing.T) {
	ts := newTestSweep(RigTurntable, 4, 8, 6, 3)
	axis := Axis{Point: r3.Vec{X: 0.01, Y: 0.1, Z: 0.5}, Direction: mesh.Normalize(r3.Vec{Y: -0.8, Z: -0.5})}
	ts.m.Turntable = &Turntable{AngleSign: -1, Axis: &axis}
	dir := t.TempDir()
	ts.write(t, dir)
	s, err := LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	f, err := s.Frame(1)
	if err != nil {
		t.Fatal(err)
	}
	if !f.HasPose {
		t.Fatal("calibrated turntable frame has no pose")
	}
	// A clockwise turn of 90°: a world point x is seen in frame 1 at
	// R(d, −90°)(x − p) + p; the pose must map it back to x.
	x := r3.Vec{X: 0.05, Y: 0.08, Z: 0.52}
	r := mesh.RotationFromAxisAngle(axis.Direction, -math.Pi/2)
	seen := r3.Add(r.MulVec(r3.Sub(x, axis.Point)), axis.Point)
	if back := f.CamToWorld.Apply(seen); r3.Norm(r3.Sub(back, x)) > 1e-9 {
		t.Errorf("CamToWorld maps the seen point to %v, want %v", back, x)
	}
}

// brokenCase is a sweep broken on purpose and the error it must give.
type brokenCase struct {
	name   string
	break_ func(t *testing.T, dir string, ts *testSweep)
	want   string // substring of the error (or of the skip reason)
	kind   error  // ErrInvalid, ErrUnsupported or ErrNoFrames
	frame  int    // -1: sweep-level; else the frame skipped when not strict
}

func rewriteManifest(t *testing.T, dir string, edit func(m map[string]any)) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, ManifestName))
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	edit(m)
	b, err = json.MarshalIndent(m, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	writeFile(t, dir, ManifestName, b)
}

func frameMap(m map[string]any, i int) map[string]any {
	return m["frames"].([]any)[i].(map[string]any)
}

func pngBytes(t *testing.T, img image.Image) []byte {
	var b bytes.Buffer
	if err := png.Encode(&b, img); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

func TestBrokenSweeps(t *testing.T) {
	cases := []brokenCase{
		{"no manifest", func(t *testing.T, dir string, ts *testSweep) {
			os.Remove(filepath.Join(dir, ManifestName))
		}, "sweep.json: file not found", ErrInvalid, -1},
		{"syntax error", func(t *testing.T, dir string, ts *testSweep) {
			writeFile(t, dir, ManifestName, []byte("{\n  \"format\": \"scanfold.sweep\",\n  \"version\": 1,,\n}"))
		}, "sweep.json:3: JSON syntax error", ErrInvalid, -1},
		{"trailing data", func(t *testing.T, dir string, ts *testSweep) {
			b, _ := os.ReadFile(filepath.Join(dir, ManifestName))
			writeFile(t, dir, ManifestName, append(b, []byte("\n{}")...))
		}, "unexpected data after the JSON value", ErrInvalid, -1},
		{"unknown version", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["version"] = 2 })
		}, "version: format version 2 is not supported; this scanfold reads version 1", ErrUnsupported, -1},
		{"missing version", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { delete(m, "version") })
		}, "version: missing", ErrInvalid, -1},
		{"wrong format", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["format"] = "other" })
		}, `format: "other" is not a scanfold sweep manifest`, ErrInvalid, -1},
		{"unknown field", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["depth_units"] = 0.001 })
		}, `unknown field "depth_units"`, ErrInvalid, -1},
		{"unknown frame field", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { frameMap(m, 1)["turntable_degs"] = 3 })
		}, `frames[1]: unknown field "turntable_degs"`, ErrInvalid, -1},
		{"wrong type", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["intrinsics"].(map[string]any)["width"] = "640" })
		}, "intrinsics.width: string where an integer was expected", ErrInvalid, -1},
		{"rig unknown", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["rig"] = "drone" })
		}, `rig: "drone" is not a rig`, ErrInvalid, -1},
		{"focal length zero", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["intrinsics"].(map[string]any)["fx"] = 0 })
		}, "intrinsics: fx = 0, want a positive finite focal length", ErrInvalid, -1},
		{"intrinsics missing cy", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { delete(m["intrinsics"].(map[string]any), "cy") })
		}, "intrinsics.cy: missing", ErrInvalid, -1},
		{"principal point outside", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["intrinsics"].(map[string]any)["cx"] = 500 })
		}, "intrinsics: cx = 500 outside the image", ErrInvalid, -1},
		{"too many pixels", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) {
				in := m["intrinsics"].(map[string]any)
				in["width"], in["height"] = 16000, 16000
			})
		}, "16000×16000 pixels, more than the 16777216", ErrInvalid, -1},
		{"depth unit zero", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["depth_unit_m"] = 0 })
		}, "depth_unit_m: 0 m per count is outside", ErrInvalid, -1},
		{"depth unit absurd", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["depth_unit_m"] = 1 })
		}, "depth_unit_m: 1 m per count is outside", ErrInvalid, -1},
		{"depth range inverted", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["depth_range_m"] = map[string]any{"near": 2, "far": 1} })
		}, "depth_range_m: near 2 m, far 1 m", ErrInvalid, -1},
		{"no frames", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["frames"] = []any{} })
		}, "frames: empty; a sweep needs at least one frame", ErrInvalid, -1},
		{"too many frames", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) {
				fr := make([]any, MaxFrames+1)
				for i := range fr {
					fr[i] = map[string]any{}
				}
				m["frames"] = fr
			})
		}, "frames: 20001 frames, more than the 20000", ErrInvalid, -1},
		{"duplicate path", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { frameMap(m, 2)["depth"] = "./depth/0001.png" })
		}, `frames[2].depth: "depth/0001.png" is also frames[1].depth`, ErrInvalid, -1},
		{"path escapes", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { frameMap(m, 1)["color"] = "../color/0001.png" })
		}, `frames[1].color: "../color/0001.png": path leaves the sweep folder`, ErrInvalid, -1},
		{"absolute path", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { frameMap(m, 1)["color"] = "/etc/passwd" })
		}, `frames[1].color: "/etc/passwd": absolute path`, ErrInvalid, -1},
		{"missing depth path", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { delete(frameMap(m, 3), "depth") })
		}, "frames[3].depth: missing", ErrInvalid, -1},
		{"pose in turntable sweep", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) {
				frameMap(m, 1)["cam_to_world"] = []any{1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1}
			})
		}, "frames[1].cam_to_world: given in a turntable sweep", ErrInvalid, -1},

		// Per-frame problems: skipped with a reason unless strict.
		{"missing file", func(t *testing.T, dir string, ts *testSweep) {
			os.Remove(filepath.Join(dir, "depth", "0001.png"))
		}, "frame 1 (depth): depth/0001.png: file not found", ErrInvalid, 1},
		{"8-bit depth", func(t *testing.T, dir string, ts *testSweep) {
			writeFile(t, dir, "depth/0002.png", pngBytes(t, image.NewGray(image.Rect(0, 0, 24, 16))))
		}, "frame 2 (depth): depth/0002.png: 8-bit depth image", ErrInvalid, 2},
		{"colour depth image", func(t *testing.T, dir string, ts *testSweep) {
			writeFile(t, dir, "depth/0002.png", pngBytes(t, ts.colors[2]))
		}, "frame 2 (depth): depth/0002.png: 8-bit RGB PNG; depth must be 16-bit grayscale", ErrInvalid, 2},
		{"16-bit colour", func(t *testing.T, dir string, ts *testSweep) {
			writeFile(t, dir, "color/0002.png", pngBytes(t, image.NewRGBA64(image.Rect(0, 0, 24, 16))))
		}, "frame 2 (color): color/0002.png: 16-bit RGBA PNG; colour must have 8 bits per channel", ErrInvalid, 2},
		{"colour wrong size", func(t *testing.T, dir string, ts *testSweep) {
			img := image.NewNRGBA(image.Rect(0, 0, 12, 16))
			for i := 3; i < len(img.Pix); i += 4 {
				img.Pix[i] = 255
			}
			writeFile(t, dir, "color/0003.png", pngBytes(t, img))
		}, "frame 3 (color): color/0003.png: 12×16 pixels, but the intrinsics say 24×16", ErrInvalid, 3},
		{"not a PNG", func(t *testing.T, dir string, ts *testSweep) {
			writeFile(t, dir, "depth/0001.png", []byte("GIF89a this is not a png"))
		}, "frame 1 (depth): depth/0001.png: not a readable PNG: png: invalid format: not a PNG file", ErrInvalid, 1},
		{"truncated header", func(t *testing.T, dir string, ts *testSweep) {
			b, _ := os.ReadFile(filepath.Join(dir, "depth", "0001.png"))
			writeFile(t, dir, "depth/0001.png", b[:20])
		}, "frame 1 (depth): depth/0001.png: truncated PNG", ErrInvalid, 1},
		{"truncated data", func(t *testing.T, dir string, ts *testSweep) {
			b, _ := os.ReadFile(filepath.Join(dir, "depth", "0001.png"))
			writeFile(t, dir, "depth/0001.png", b[:len(b)/2])
		}, "frame 1 (depth): depth/0001.png: truncated PNG", ErrInvalid, 1},
		{"corrupt data", func(t *testing.T, dir string, ts *testSweep) {
			b, _ := os.ReadFile(filepath.Join(dir, "color", "0002.png"))
			b = corruptIDAT(t, b)
			writeFile(t, dir, "color/0002.png", b)
		}, "frame 2 (color): color/0002.png: corrupt PNG data", ErrInvalid, 2},
		{"angle missing", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { delete(frameMap(m, 2), "turntable_deg") })
		}, "frame 2 (turntable_deg): sweep.json: missing; without a calibrated turntable axis every frame needs its angle", ErrInvalid, 2},
		{"angle overflow", func(t *testing.T, dir string, ts *testSweep) {
			b, _ := os.ReadFile(filepath.Join(dir, ManifestName))
			b = bytes.Replace(b, []byte(`"turntable_deg": 180`), []byte(`"turntable_deg": 1e999`), 1)
			writeFile(t, dir, ManifestName, b)
		}, "frame 2 (turntable_deg): sweep.json: +Inf is not a finite angle", ErrInvalid, 2},
		{"all frames bad", func(t *testing.T, dir string, ts *testSweep) {
			os.RemoveAll(filepath.Join(dir, "depth"))
		}, "no usable frames", ErrNoFrames, -1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ts := newTestSweep(RigTurntable, 4, 24, 16, 11)
			dir := t.TempDir()
			ts.write(t, dir)
			c.break_(t, dir, ts)
			checkBroken(t, dir, c)
		})
	}
}

// handheld-specific breakages.
func TestBrokenHandheldSweeps(t *testing.T) {
	cases := []brokenCase{
		{"angle in handheld", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { frameMap(m, 1)["turntable_deg"] = 10 })
		}, "frames[1].turntable_deg: given in a handheld sweep", ErrInvalid, -1},
		{"turntable block in handheld", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { m["turntable"] = map[string]any{"angle_direction": "ccw"} })
		}, "turntable: given for a handheld sweep", ErrInvalid, -1},
		{"non-rigid pose", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) {
				frameMap(m, 1)["cam_to_world"] = []any{1.01, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1}
			})
		}, "frame 1 (cam_to_world): sweep.json: not a rigid transform: rotation is not orthonormal", ErrInvalid, 1},
		{"reflection pose", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) {
				frameMap(m, 1)["cam_to_world"] = []any{-1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1}
			})
		}, "frame 1 (cam_to_world): sweep.json: not a rigid transform: rotation determinant is -1", ErrInvalid, 1},
		{"pose overflow", func(t *testing.T, dir string, ts *testSweep) {
			b, _ := os.ReadFile(filepath.Join(dir, ManifestName))
			i := bytes.Index(b, []byte(`"cam_to_world": [`))
			j := i + bytes.IndexByte(b[i:], '[') + 1
			b = append(b[:j:j], append([]byte("1e999,"), b[j+bytes.IndexByte(b[j:], ',')+1:]...)...)
			writeFile(t, dir, ManifestName, b)
		}, "frame 0 (cam_to_world): sweep.json: not a rigid transform: pose matrix entry 0 is +Inf", ErrInvalid, 0},
		{"pose short", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) { frameMap(m, 3)["cam_to_world"] = []any{1, 0, 0} })
		}, "frame 3 (cam_to_world): sweep.json: 3 numbers, want 16", ErrInvalid, 3},
		{"pose bottom row", func(t *testing.T, dir string, ts *testSweep) {
			rewriteManifest(t, dir, func(m map[string]any) {
				frameMap(m, 3)["cam_to_world"] = []any{1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 1, 1}
			})
		}, "frame 3 (cam_to_world): sweep.json: not a rigid transform: pose matrix bottom row", ErrInvalid, 3},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ts := newTestSweep(RigHandheld, 4, 24, 16, 12)
			dir := t.TempDir()
			ts.write(t, dir)
			c.break_(t, dir, ts)
			checkBroken(t, dir, c)
		})
	}
}

func checkBroken(t *testing.T, dir string, c brokenCase) {
	t.Helper()
	opt := LoadOptions{Strict: true, CheckPixels: true}
	if c.kind == ErrNoFrames {
		opt.Strict = false // strict lists each frame's problem instead
	}
	_, err := LoadSweepWith(context.Background(), dir, opt)
	if err == nil {
		t.Fatalf("load succeeded, want an error containing %q", c.want)
	}
	if !strings.Contains(err.Error(), c.want) {
		t.Fatalf("load error:\n  %v\nwant it to contain\n  %s", err, c.want)
	}
	if !errors.Is(err, c.kind) {
		t.Errorf("error %v does not wrap %v", err, c.kind)
	}
	if c.frame < 0 {
		// Sweep-level: fatal whatever the options.
		if _, err := LoadSweep(dir); err == nil {
			t.Errorf("lenient load of a sweep-level problem succeeded")
		}
		return
	}
	// Per-frame: a lenient load that decodes pixels skips exactly that
	// frame and records why.
	s, err := LoadSweepWith(context.Background(), dir, LoadOptions{CheckPixels: true})
	if err != nil {
		t.Fatalf("lenient load: %v", err)
	}
	if len(s.Skipped) != 1 || s.Skipped[0].Frame != c.frame {
		t.Fatalf("skipped %v, want frame %d only", s.Skipped, c.frame)
	}
	if !strings.Contains(s.Skipped[0].Error(), c.want) {
		t.Errorf("skip reason %q does not contain %q", s.Skipped[0].Error(), c.want)
	}
	if got, want := len(s.Usable()), s.NumFrames()-1; got != want {
		t.Errorf("usable = %d, want %d", got, want)
	}
	if _, err := s.Frame(c.frame); err == nil || !strings.Contains(err.Error(), c.want) {
		t.Errorf("Frame(%d) = %v, want the recorded reason", c.frame, err)
	}
}

// corruptIDAT flips a byte inside the first IDAT chunk's compressed
// data and fixes the chunk CRC, so that only the zlib stream is broken.
func corruptIDAT(t *testing.T, b []byte) []byte {
	t.Helper()
	b = append([]byte(nil), b...)
	i := bytes.Index(b, []byte("IDAT"))
	if i < 4 {
		t.Fatal("no IDAT chunk")
	}
	n := int(b[i-4])<<24 | int(b[i-3])<<16 | int(b[i-2])<<8 | int(b[i-1])
	// Damage the zlib header (first two bytes of the data): a bad
	// header check is reported as a zlib error.
	b[i+4] ^= 0xff
	b[i+5] ^= 0x5a
	crc := crc32.ChecksumIEEE(b[i : i+4+n])
	b[i+4+n], b[i+5+n], b[i+6+n], b[i+7+n] = byte(crc>>24), byte(crc>>16), byte(crc>>8), byte(crc)
	return b
}

func TestTruncatedDataFoundByFrame(t *testing.T) {
	// Without CheckPixels, a PNG truncated after its header passes the
	// load and Frame reports it.
	ts := newTestSweep(RigTurntable, 3, 24, 16, 5)
	dir := t.TempDir()
	ts.write(t, dir)
	b, _ := os.ReadFile(filepath.Join(dir, "depth", "0001.png"))
	writeFile(t, dir, "depth/0001.png", b[:len(b)-20])
	s, err := LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(s.Skipped) != 0 {
		t.Fatalf("header-only load skipped %v", s.Skipped)
	}
	_, err = s.Frame(1)
	var fe *FrameError
	if !errors.As(err, &fe) || fe.Frame != 1 || fe.Field != "depth" {
		t.Fatalf("Frame(1) error = %v, want a FrameError for frame 1's depth", err)
	}
}

func TestColorKinds(t *testing.T) {
	// Grey and paletted 8-bit colour images load as NRGBA.
	ts := newTestSweep(RigTurntable, 2, 4, 3, 9)
	dir := t.TempDir()
	ts.write(t, dir)
	g := image.NewGray(image.Rect(0, 0, 4, 3))
	g.Pix[5] = 200
	writeFile(t, dir, "color/0000.png", pngBytes(t, g))
	pal := image.NewPaletted(image.Rect(0, 0, 4, 3), color.Palette{color.NRGBA{1, 2, 3, 255}, color.NRGBA{9, 8, 7, 255}})
	pal.Pix[2] = 1
	writeFile(t, dir, "color/0001.png", pngBytes(t, pal))
	s, err := LoadSweepWith(context.Background(), dir, LoadOptions{Strict: true, CheckPixels: true})
	if err != nil {
		t.Fatal(err)
	}
	f0, _ := s.Frame(0)
	if got := f0.Color.NRGBAAt(1, 1); got != (color.NRGBA{200, 200, 200, 255}) {
		t.Errorf("grey pixel = %v", got)
	}
	f1, _ := s.Frame(1)
	if got := f1.Color.NRGBAAt(2, 0); got != (color.NRGBA{9, 8, 7, 255}) {
		t.Errorf("paletted pixel = %v", got)
	}
}

// BenchmarkSweepFrame reads one 640×480 frame (a 16-bit depth PNG and
// an RGB PNG of random content, the worst case for compression).
func BenchmarkSweepFrame(b *testing.B) {
	ts := newTestSweep(RigTurntable, 1, 640, 480, 1)
	dir := b.TempDir()
	ts.write(b, dir)
	s, err := LoadSweep(dir)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := s.Frame(0); err != nil {
			b.Fatal(err)
		}
	}
}
