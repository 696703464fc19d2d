package validate

import (
	"context"
	"math"
	"os"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// revolve sweeps a profile of (radius, height) points round the z axis
// in n steps into a band of quads per profile segment, wound so that a
// profile running up the inside of a bore and down the outside faces
// out of the material.
func revolve(profile [][2]float64, n int) *mesh.Mesh {
	m := &mesh.Mesh{}
	for _, p := range profile {
		for k := 0; k < n; k++ {
			s, c := math.Sincos(2 * math.Pi * float64(k) / float64(n))
			m.Vertices = append(m.Vertices, r3.Vec{X: p[0] * c, Y: p[0] * s, Z: p[1]})
		}
	}
	for i := 0; i+1 < len(profile); i++ {
		for k := 0; k < n; k++ {
			a := uint32(i*n + k)
			b := uint32(i*n + (k+1)%n)
			c := uint32((i+1)*n + (k+1)%n)
			d := uint32((i+1)*n + k)
			m.Faces = append(m.Faces, mesh.Face{a, c, b}, mesh.Face{a, d, c})
		}
	}
	return m
}

// ring returns n camera centres on a circle round the z axis at the
// given distance and elevation above the plane z = 0.
func ring(dist, elevation float64, n int) []r3.Vec {
	var out []r3.Vec
	se, ce := math.Sincos(elevation)
	for k := 0; k < n; k++ {
		s, c := math.Sincos(2 * math.Pi * float64(k) / float64(n))
		out = append(out, r3.Vec{X: dist * ce * c, Y: dist * ce * s, Z: dist * se})
	}
	return out
}

// TestTriangleSetBlocked: the Möller–Trumbore segment test on cases
// worked by hand. The triangle (0,0,0), (1,0,0), (0,1,0) covers the
// points of z = 0 with x, y ≥ 0 and x + y ≤ 1.
func TestTriangleSetBlocked(t *testing.T) {
	ts := newTriangleSet(&mesh.Mesh{Vertices: []r3.Vec{{}, {X: 1}, {Y: 1}}, Faces: []mesh.Face{{0, 1, 2}}})
	for _, c := range []struct {
		p, q r3.Vec
		want bool
	}{
		{r3.Vec{X: 0.2, Y: 0.2, Z: -1}, r3.Vec{X: 0.2, Y: 0.2, Z: 1}, true},   // straight through (u = v = 0.2)
		{r3.Vec{X: 0.6, Y: 0.6, Z: -1}, r3.Vec{X: 0.6, Y: 0.6, Z: 1}, false},  // u + v = 1.2 > 1: beside it
		{r3.Vec{X: 0.2, Y: 0.2, Z: 0.5}, r3.Vec{X: 0.2, Y: 0.2, Z: 1}, false}, // stops short (s would be −1)
		{r3.Vec{X: -1, Y: 0.2, Z: -1}, r3.Vec{X: 1, Y: 0.2, Z: 1}, true},      // slanted, crosses z = 0 at x = 0
		{r3.Vec{X: 0.1, Y: 0.1, Z: 1}, r3.Vec{X: 0.5, Y: 0.1, Z: 1}, false},   // parallel, above it
	} {
		if got := ts.blocked(c.p, c.q); got != c.want {
			t.Errorf("segment %v → %v: blocked %v, want %v", c.p, c.q, got, c.want)
		}
	}
}

// TestMarkRecesses: a bushing (outer radius 12 mm, bore 6 mm, 20 mm
// tall) whose bore was scanned only 8 mm down. Seen from a ring of
// cameras 30° above its support, the centre of the bore at that depth
// lies behind its walls (the bore admits lines of sight within
// atan(6/8) = 36.9° of the axis, the cameras are 60° off it): the
// opening is a recess, not a hole. From cameras 85° above the support
// the sweep could have looked in: a hole.
func TestMarkRecesses(t *testing.T) {
	const mm = 1e-3
	tube := revolve([][2]float64{{6 * mm, 12 * mm}, {6 * mm, 20 * mm}, {12 * mm, 20 * mm}, {12 * mm, 0}}, 48)
	for _, c := range []struct {
		elevation float64
		recessed  bool
	}{{30, true}, {85, false}} {
		o, err := FindOpenings(tube, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		var bore *Opening
		for i := range o.List {
			if math.Abs(o.List[i].Centroid.Z-12*mm) < 1e-6 {
				bore = &o.List[i]
			}
		}
		if bore == nil || bore.Normal.Z < 0.99 || bore.OnSupport {
			t.Fatalf("no upward opening at the bore's scanned depth: %+v", o.List)
		}
		holes := o.HoleArea
		o.MarkRecesses(tube, ring(0.5, c.elevation*math.Pi/180, 36))
		if bore.Recessed != c.recessed {
			t.Errorf("cameras %v° up: recessed %v, want %v", c.elevation, bore.Recessed, c.recessed)
		}
		disc := math.Pi * 36 * mm * mm // the patch: a 48-gon inscribed in the bore, within 0.3 %
		if c.recessed {
			if math.Abs(o.RecessArea-disc) > 0.003*disc || o.HoleArea > 1e-12 || !(o.RecessFraction > 0) {
				t.Errorf("recess area %g (want %g), holes %g", o.RecessArea, disc, o.HoleArea)
			}
		} else if o.HoleArea != holes || o.RecessArea != 0 {
			t.Errorf("hole area %g → %g, recess %g", holes, o.HoleArea, o.RecessArea)
		}
	}
}

// TestSymmetryFusedNut: the demo hex nut as fused from a 72-frame
// synthetic turntable sweep at 1.5 mm voxels (testdata/nut-fused.ply,
// written by scanfold onboard), its corners rounded by the fusion, is
// 6-fold about its axis given the fusion's resolution: the turn by
// 360°/7 comes within the tolerance there, but the group's other turns
// do not. Without the resolution the fusion's noise hides the symmetry.
func TestSymmetryFusedNut(t *testing.T) {
	f, err := os.Open("testdata/nut-fused.ply")
	if err != nil {
		t.Fatal(err)
	}
	m, err := mesh.ReadPLY(f)
	f.Close()
	if err != nil {
		t.Fatal(err)
	}
	opt := DefaultSymmetryOptions()
	opt.Resolution = 0.0015
	r, err := DetectSymmetry(m, opt)
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Geometry) == 0 || r.Geometry[0].Fold != 6 || math.Abs(r.Geometry[0].Axis.Z) < 0.99 {
		t.Fatalf("fused nut: %+v, want 6-fold about z", r.Geometry)
	}
	opt.Resolution = 0
	if r, err = DetectSymmetry(m, opt); err != nil || len(r.Geometry) != 0 {
		t.Errorf("fused nut without its resolution: %+v, %v", r.Geometry, err)
	}
}

// TestCheckRestsAsScanned: the bracket with the face it stood on cut
// away, checked for a cell that presents it as it stood: every view
// shows it in the resting pose whose face points down the part frame's
// z axis, the finding says so, and neither the views of other resting
// poses nor unseen undersides argue for review. Without knowing where
// it stood, the option is refused.
func TestCheckRestsAsScanned(t *testing.T) {
	if testing.Short() {
		t.Skip("renders views")
	}
	cp := demoCheckPart(t, "bracket")
	m := cutBelow(cp.mesh, 0.0005)
	opt := DefaultCheckOptions()
	opt.Views = 6
	opt.RestsAsScanned = true
	in := CheckInput{Name: "bracket", Model: m, Tables: tablesFor(t, m)}
	if _, err := Check(context.Background(), in, opt); err == nil || !strings.Contains(err.Error(), "SupportZ") {
		t.Errorf("rests as scanned without the support: err = %v", err)
	}
	in.SupportKnown = true
	res := runCheck(t, in, opt)
	if !res.RestsAsScanned || res.ScannedRest < 0 || res.Stable.Poses[res.ScannedRest].Normal.Z > -math.Cos(15*math.Pi/180) {
		t.Fatalf("scanned rest %d of %+v", res.ScannedRest, res.Stable.Poses)
	}
	for _, v := range res.Views {
		if v.StablePose != res.ScannedRest {
			t.Errorf("view %d rests in pose %d, want %d", v.Index, v.StablePose, res.ScannedRest)
		}
	}
	expectReason(t, "rests as scanned", res, CodeRestsAsScanned, VerdictReady)
	expectNoReason(t, "rests as scanned", res, CodeUnscannedSide)
	if r, ok := reasonFor(res, CodeUndersides); ok && r.Verdict != VerdictReady {
		t.Errorf("undersides: %s", r.Message)
	}
}
