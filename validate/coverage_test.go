package validate

import (
	"bytes"
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// tstSmallCamera is a 320×240 pinhole camera with the commonly quoted
// 640×480 structured-light focal length halved (from memory).
func tstSmallCamera() mesh.Intrinsics {
	return mesh.Intrinsics{Width: 320, Height: 240, Fx: 262.5, Fy: 262.5, Cx: 159.5, Cy: 119.5}
}

func tstLookAt(t testing.TB, eye, target, up r3.Vec) mesh.Pose {
	t.Helper()
	p, err := mesh.LookAt(eye, target, up)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// A cube seen only from straight above and straight in front has seen
// two of its six equal faces: seen area 2/6 of 6a² (handbook cube
// area). The visible-fraction rule decides whole triangles, so the
// rasterisation of the edges can change the answer by at most the
// triangles along the two faces' borders; with the rule it should not
// change it at all, and one triangle is allowed.
func TestCoverageCubeTwoViews(t *testing.T) {
	const a = 0.05
	const n = 4
	cube := tstBox(a, a, a, n)
	intr := tstSmallCamera()
	above := tstLookAt(t, r3.Vec{Z: 0.3}, r3.Vec{}, r3.Vec{Y: 1})
	front := tstLookAt(t, r3.Vec{Y: -0.3}, r3.Vec{}, r3.Vec{Z: 1})
	cov, err := ComputeCoverage(context.Background(), cube, intr, []mesh.Pose{above, front}, nil, DefaultCoverageOptions())
	if err != nil {
		t.Fatal(err)
	}
	total := 6 * a * a
	tri := a * a / (2 * n * n)
	if math.Abs(cov.TotalArea-total) > 1e-15 {
		t.Fatalf("total area %v, want 6a² = %v", cov.TotalArea, total)
	}
	if math.Abs(cov.SeenArea-total/3) > tri*1.0001 {
		t.Errorf("seen %.6g m² (%.4f), want 2a² = %.6g (1/3) ± one triangle", cov.SeenArea, cov.SeenFraction, total/3)
	}
	// Every seen face was seen once: the [1, 1] bin holds the seen area.
	if cov.Histogram[1].Min != 1 || cov.Histogram[1].Max != 1 || math.Abs(cov.Histogram[1].Area-cov.SeenArea) > 1e-15 ||
		math.Abs(cov.Histogram[0].Area-(total-cov.SeenArea)) > 1e-15 {
		t.Errorf("histogram %+v", cov.Histogram)
	}
	// The four unseen faces (bottom, back, left, right) form one patch
	// through their shared edges, centroid the mean of the four face
	// centres (0, a/8, −a/8), mean normal (0, 1, −1)/√2 (worked by hand).
	if len(cov.Unseen) != 1 {
		t.Fatalf("%d unseen regions, want 1: %+v", len(cov.Unseen), cov.Unseen)
	}
	u := cov.Unseen[0]
	want := r3.Vec{Y: a / 8, Z: -a / 8}
	if math.Abs(u.Area-4*a*a) > 1e-15 || r3.Norm(r3.Sub(u.Centroid, want)) > 1e-15 ||
		r3.Norm(r3.Sub(u.Normal, r3.Vec{Y: math.Sqrt2 / 2, Z: -math.Sqrt2 / 2})) > 1e-12 {
		t.Errorf("unseen region area %.6g centroid %v normal %v, want %.6g %v (0, .707, −.707)", u.Area, u.Centroid, u.Normal, 4*a*a, want)
	}
	if len(cov.FaceViews) != len(cube.Faces) || len(cov.VertexViews) != len(cube.Vertices) {
		t.Fatal("per-face or per-vertex values missing")
	}
	path := filepath.Join(t.TempDir(), "coverage.ply")
	if err := SaveCoveragePLY(path, cube, cov); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	back, sc, err := mesh.ReadPLYScalars(bytes.NewReader(data))
	if err != nil || len(sc) != 1 || sc[0].Name != "views" || len(back.Colors) != len(cube.Vertices) {
		t.Fatalf("coverage PLY: %v, %d scalars", err, len(sc))
	}
	// A top vertex in the middle of the top face was seen once.
	for i, v := range cube.Vertices {
		if v.Z == a/2 && math.Abs(v.X) < a/4 && math.Abs(v.Y) < a/4 && cov.VertexViews[i] != 1 {
			t.Errorf("vertex %v: %v views, want 1", v, cov.VertexViews[i])
		}
	}
}

// Depth images: a frame whose depth image measured nothing counts for
// nothing; one that measured the rendered surface counts as without
// images; one that measured something nearer (an occluder) counts for
// nothing.
func TestCoverageDepthImages(t *testing.T) {
	const a = 0.05
	cube := tstBox(a, a, a, 4)
	intr := tstSmallCamera()
	above := tstLookAt(t, r3.Vec{Z: 0.3}, r3.Vec{}, r3.Vec{Y: 1})
	front := tstLookAt(t, r3.Vec{Y: -0.3}, r3.Vec{}, r3.Vec{Z: 1})
	fr, err := render.Render(intr, []render.Object{{Mesh: cube, ModelToCam: front.Inv()}}, render.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	nearer := make([]float32, len(fr.Depth))
	for i, d := range fr.Depth {
		if d > 0 {
			nearer[i] = d - 0.02
		}
	}
	empty := make([]float32, intr.Width*intr.Height)
	opt := DefaultCoverageOptions()
	for _, tc := range []struct {
		name   string
		depths [][]float32
		want   float64
	}{
		{"front measured", [][]float32{empty, fr.Depth}, 1.0 / 6},
		{"no image above", [][]float32{nil, fr.Depth}, 2.0 / 6},
		{"occluded", [][]float32{empty, nearer}, 0},
	} {
		cov, err := ComputeCoverage(context.Background(), cube, intr, []mesh.Pose{above, front}, tc.depths, opt)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(cov.SeenFraction-tc.want) > 1.0/(6*32) {
			t.Errorf("%s: seen %.4f, want %.4f", tc.name, cov.SeenFraction, tc.want)
		}
	}
}

// tstHemisphere returns CamToWorld poses on rings of the upper
// hemisphere around centre, looking at it: elevations 20°, 45° and 70°,
// azimuth every 360°/perRing.
func tstHemisphere(t testing.TB, centre r3.Vec, dist float64, perRing int) []mesh.Pose {
	var out []mesh.Pose
	for _, el := range []float64{20, 45, 70} {
		e := el * math.Pi / 180
		for k := 0; k < perRing; k++ {
			az := 2 * math.Pi * float64(k) / float64(perRing)
			eye := r3.Add(centre, r3.Scale(dist, r3.Vec{X: math.Cos(e) * math.Cos(az), Y: math.Cos(e) * math.Sin(az), Z: math.Sin(e)}))
			out = append(out, tstLookAt(t, eye, centre, r3.Vec{Z: 1}))
		}
	}
	return out
}

// A closed part seen from an upper-hemisphere sweep: its underside
// (z = 0, normal −z) is never seen and is the largest unseen region;
// it holds at least the bracket's footprint less its hole (60×40 mm
// minus a Ø8.5 disc, from the part's documented dimensions).
func TestCoverageHemisphereUnderside(t *testing.T) {
	part, _ := tstPart(t, "bracket", 0.001)
	poses := tstHemisphere(t, r3.Vec{Z: 0.02}, 0.35, 8)
	cov, err := ComputeCoverage(context.Background(), part, tstSmallCamera(), poses, nil, DefaultCoverageOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(cov.Unseen) == 0 {
		t.Fatal("no unseen region")
	}
	u := cov.Unseen[0]
	footprint := 0.060*0.040 - math.Pi*0.00425*0.00425
	t.Logf("seen %.3f, mean views %.2f, %d unseen regions; largest %.0f mm² at %.1f mm, normal %.2f",
		cov.SeenFraction, cov.MeanViews, len(cov.Unseen), u.Area*1e6, u.Centroid.Z*1e3, u.Normal)
	// The marching-cubes surface cuts the footprint's edges by up to a
	// lattice spacing (1 mm): allow a 1 mm strip along the rim, 200 mm
	// outside and π·8.5 mm around the hole.
	rim := 0.200 + math.Pi*0.0085
	if u.Normal.Z > -0.9 || u.Centroid.Z > 0.002 || u.Area < footprint-rim*0.001 {
		t.Errorf("largest unseen region: area %.0f mm² (footprint %.0f), centroid z %.2f mm, normal %v; want the underside",
			u.Area*1e6, footprint*1e6, u.Centroid.Z*1e3, u.Normal)
	}
	if cov.SeenFraction < 0.6 || cov.SeenFraction > 0.95 {
		t.Errorf("seen fraction %.3f, want most but not all", cov.SeenFraction)
	}
}

func TestCoverageErrors(t *testing.T) {
	cube := tstBox(0.05, 0.05, 0.05, 1)
	intr := tstSmallCamera()
	pose := tstLookAt(t, r3.Vec{Z: 0.3}, r3.Vec{}, r3.Vec{Y: 1})
	ctx := context.Background()
	opt := DefaultCoverageOptions()
	if _, err := ComputeCoverage(ctx, cube, intr, []mesh.Pose{pose}, [][]float32{make([]float32, 5)}, opt); err == nil {
		t.Error("short depth image: no error")
	}
	if _, err := ComputeCoverage(ctx, cube, intr, []mesh.Pose{pose}, [][]float32{}, opt); err == nil {
		t.Error("depth count mismatch: no error")
	}
	if _, err := ComputeCoverage(ctx, cube, intr, []mesh.Pose{{}}, nil, opt); err == nil {
		t.Error("zero pose: no error")
	}
	if _, err := ComputeCoverage(ctx, &mesh.Mesh{}, intr, []mesh.Pose{pose}, nil, opt); !errors.Is(err, mesh.ErrDegenerate) {
		t.Errorf("empty mesh: %v, want ErrDegenerate", err)
	}
	bad := opt
	bad.HistogramEdges = []int{0, 3, 2}
	if _, err := ComputeCoverage(ctx, cube, intr, []mesh.Pose{pose}, nil, bad); err == nil {
		t.Error("decreasing histogram edges: no error")
	}
	cov, err := ComputeCoverage(ctx, cube, intr, nil, nil, opt)
	if err != nil || cov.SeenArea != 0 || len(cov.Unseen) != 1 {
		t.Errorf("no frames: %v, %+v", err, cov)
	}
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	if _, err := ComputeCoverage(cctx, cube, intr, []mesh.Pose{pose}, nil, opt); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled: %v", err)
	}
}

// BenchmarkCoverage72 counts coverage of the bracket at about 50k
// triangles over a 72-frame upper-hemisphere sweep at 640×480.
func BenchmarkCoverage72(b *testing.B) {
	part, _ := tstPart(b, "bracket", 0.0006)
	poses := tstHemisphere(b, r3.Vec{Z: 0.02}, 0.4, 24)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := ComputeCoverage(context.Background(), part, mesh.DefaultIntrinsics(), poses, nil, DefaultCoverageOptions()); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(part.Faces)), "faces")
}
