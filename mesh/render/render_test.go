package render

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// testCameras are the cameras the geometric checks run with: the
// commonly quoted 640×480 structured-light defaults (mesh.DefaultIntrinsics,
// principal point on a half-integer, so that symmetric edges pass exactly
// through pixel centres), and one with the principal point off-centre
// and fx ≠ fy.
func testCameras() map[string]mesh.Intrinsics {
	return map[string]mesh.Intrinsics{
		"default":   mesh.DefaultIntrinsics(),
		"offcentre": {Width: 320, Height: 200, Fx: 300, Fy: 260, Cx: 140.3, Cy: 121.7},
	}
}

// TestPlaneDepthExact checks the pinhole model (z along the optical axis
// is the same at every pixel of a fronto-parallel plane, and a pixel
// centre (u, v) sees the plane point ((u−Cx)·z/Fx, (v−Cy)·z/Fy, z)):
// every pixel whose centre ray meets the rectangle is covered, with the
// plane's depth within 0.1 mm, and no other pixel is covered.
func TestPlaneDepthExact(t *testing.T) {
	for name, k := range testCameras() {
		r, err := NewRenderer(k)
		if err != nil {
			t.Fatal(err)
		}
		for _, z := range []float64{0.3, 0.5, 1, 2.5, 7} {
			hx, hy := 0.25*z, 0.2*z
			x0, y0 := 0.03*z, -0.02*z
			obj := Object{Mesh: quadMesh(hx, hy), ModelToCam: translate(x0, y0, z), Color: mesh.RGB{R: 200, G: 100, B: 50}}
			f, err := r.Render([]Object{obj}, DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			covered, bad := 0, 0
			for j := 0; j < k.Height; j++ {
				for i := 0; i < k.Width; i++ {
					p := j*k.Width + i
					// Signed distance (metres, in the plane) of the ray's hit
					// to the rectangle's border; pixels within 1e−9·z of it
					// are ambiguous at rounding level and skipped.
					X := (float64(i)-k.Cx)*z/k.Fx - x0
					Y := (float64(j)-k.Cy)*z/k.Fy - y0
					in := math.Min(hx-math.Abs(X), hy-math.Abs(Y))
					if math.Abs(in) < 1e-9*z {
						continue
					}
					got := f.Depth[p]
					if in > 0 {
						covered++
						// 0.1 mm is the brief's bound; float32 depth alone
						// rounds to 2^−24·z ≈ 0.4 µm at 7 m.
						if math.Abs(float64(got)-z) > 1e-4 || f.Object[p] != 0 || f.Triangle[p] < 0 {
							if bad < 5 {
								t.Errorf("%s z=%v: pixel (%d,%d) depth %v obj %d tri %d, want %v obj 0", name, z, i, j, got, f.Object[p], f.Triangle[p], z)
							}
							bad++
						}
					} else if got != 0 || f.Object[p] != -1 {
						if bad < 5 {
							t.Errorf("%s z=%v: pixel (%d,%d) outside the plane has depth %v obj %d", name, z, i, j, got, f.Object[p])
						}
						bad++
					}
				}
			}
			if covered == 0 {
				t.Fatalf("%s z=%v: test plane covers no pixel", name, z)
			}
			if bad > 0 {
				t.Errorf("%s z=%v: %d of %d pixels wrong", name, z, bad, covered)
			}
		}
	}
}

// TestSphereSilhouette checks the silhouette of a sphere of radius rad
// centred on the optical axis at distance z. The rays tangent to the
// sphere form a cone of half-angle α with sin α = rad/z, so a pixel
// centre is inside the silhouette iff its normalised ray (x', y') =
// ((u−Cx)/Fx, (v−Cy)/Fy) has x'² + y'² < tan²α = rad²/(z² − rad²); for
// Fx = Fy = f the silhouette is a circle of radius f·rad/√(z² − rad²)
// pixels (pinhole geometry of a sphere's tangent cone).
//
// Tolerance: the mesh is a convex polyhedron whose vertices lie on the
// sphere, so it lies inside the sphere of radius rad and contains the
// ball of radius rin = the smallest distance from the centre to a face
// plane (computed from the mesh: the chordal error is rad − rin).
// Its silhouette therefore lies between the cones of rin and rad, and
// every pixel centre inside the inner cone must be covered and none
// outside the outer cone. Pixel centres are sampled exactly, so no
// further pixel-size allowance is needed.
func TestSphereSilhouette(t *testing.T) {
	const rad = 0.05
	sphere := icosphere(rad, 5)
	rin := math.Inf(1)
	for _, f := range sphere.Faces {
		n := sphere.FaceNormal(f)
		rin = math.Min(rin, math.Abs(r3.Dot(n, sphere.Vertices[f[0]])))
	}
	if rad-rin > 2e-5 {
		t.Fatalf("test sphere too coarse: chordal error %v", rad-rin)
	}
	for name, k := range testCameras() {
		for _, z := range []float64{0.3, 0.6, 1.2} {
			// Put the sphere's centre on the optical axis.
			obj := Object{Mesh: sphere, ModelToCam: translate(0, 0, z), Color: mesh.RGB{R: 128, G: 128, B: 128}}
			f, err := Render(k, []Object{obj}, DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			tanOut := rad * rad / (z*z - rad*rad)
			tanIn := rin * rin / (z*z - rin*rin)
			count, bad := 0, 0
			for j := 0; j < k.Height; j++ {
				for i := 0; i < k.Width; i++ {
					x, y := (float64(i)-k.Cx)/k.Fx, (float64(j)-k.Cy)/k.Fy
					s := x*x + y*y
					seen := f.Depth[j*k.Width+i] > 0
					if seen {
						count++
					}
					if (s < tanIn && !seen) || (s > tanOut && seen) {
						bad++
						if bad < 5 {
							t.Errorf("%s z=%v: pixel (%d,%d) seen=%v, ray tan² %v vs cone [%v, %v]", name, z, i, j, seen, s, tanIn, tanOut)
						}
					}
				}
			}
			// The silhouette's pixel count estimates its area π·a·b with
			// semi-axes Fx·tanα and Fy·tanα; the count differs from the
			// area by at most the pixels within ±1 px of the outline
			// (about 2π·2·max(a, b)), plus the band between the cones.
			a, b := k.Fx*math.Sqrt(tanOut), k.Fy*math.Sqrt(tanOut)
			area := math.Pi * a * b
			if d := math.Abs(float64(count) - area); d > 4*math.Pi*math.Max(a, b) {
				t.Errorf("%s z=%v: silhouette has %d pixels, want π·%.2f·%.2f = %.1f", name, z, count, a, b, area)
			}
			// Depth at the pixel nearest the axis: between the first hits
			// of its ray d with the balls of radius rad and rin, the
			// smaller root of |t·d − (0, 0, z)|² = ρ² (float32 rounding of
			// z allows 1e−6 m more).
			i, j := int(math.Round(k.Cx)), int(math.Round(k.Cy))
			d := k.Ray(float64(i), float64(j))
			hit := func(rho float64) float64 {
				d2 := r3.Norm2(d)
				return (z - math.Sqrt(z*z-d2*(z*z-rho*rho))) / d2
			}
			if got := float64(f.Depth[j*k.Width+i]); got < hit(rad)-1e-6 || got > hit(rin)+1e-6 {
				t.Errorf("%s z=%v: depth near the axis %v, want in [%v, %v]", name, z, got, hit(rad), hit(rin))
			}
			if n := f.NormalAt(i, j); n.Z > -0.999 {
				t.Errorf("%s z=%v: normal on axis %v, want ≈ (0, 0, −1)", name, z, n)
			}
		}
	}
}

// TestTriangleCoverageProjects checks the camera convention against
// mesh.Intrinsics.Project: a triangle covers exactly the pixel centres
// inside the triangle of its projected vertices (straight lines project
// to straight lines under a pinhole), whatever its depth and tilt, and
// a small fronto-parallel triangle's covered pixel centres have their
// centroid at the projection of its 3-D centroid (an affine map keeps
// centroids) within the error of sampling on the pixel grid.
func TestTriangleCoverageProjects(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for name, k := range testCameras() {
		r, err := NewRenderer(k)
		if err != nil {
			t.Fatal(err)
		}
		for trial := 0; trial < 20; trial++ {
			z := 0.3 + 2*rng.Float64()
			centre := k.BackProject(float64(k.Width)*(0.2+0.6*rng.Float64()), float64(k.Height)*(0.2+0.6*rng.Float64()), z)
			size := z * 20 / k.Fx // about 20 pixels across
			var vs [3]r3.Vec
			for v := range vs {
				d := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: 0}
				if trial%2 == 1 { // tilted
					d.Z = rng.NormFloat64()
				}
				vs[v] = r3.Add(centre, r3.Scale(size, d))
			}
			m := &mesh.Mesh{Vertices: vs[:], Faces: []mesh.Face{{0, 1, 2}}}
			f, err := r.Render([]Object{{Mesh: m, ModelToCam: mesh.Identity()}}, DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			var pu, pv [3]float64
			for v := range vs {
				pu[v], pv[v] = k.Project(vs[v])
			}
			area := (pu[1]-pu[0])*(pv[2]-pv[0]) - (pu[2]-pu[0])*(pv[1]-pv[0])
			var su, sv float64
			n := 0
			for j := 0; j < k.Height; j++ {
				for i := 0; i < k.Width; i++ {
					// Edge functions of the projected triangle, in pixels of
					// distance to each edge.
					in := math.Inf(1)
					for e := 0; e < 3; e++ {
						a, b := e, (e+1)%3
						ex, ey := pu[b]-pu[a], pv[b]-pv[a]
						d := (ex*(float64(j)-pv[a]) - ey*(float64(i)-pu[a])) / math.Hypot(ex, ey)
						if area < 0 {
							d = -d
						}
						in = math.Min(in, d)
					}
					seen := f.Depth[j*k.Width+i] > 0
					if seen {
						su += float64(i)
						sv += float64(j)
						n++
					}
					if math.Abs(in) < 1e-6 {
						continue // a pixel centre on an edge, to rounding
					}
					if seen != (in > 0) {
						t.Errorf("%s trial %d: pixel (%d,%d) seen=%v, projected-triangle test says %v (distance %v px)", name, trial, i, j, seen, in > 0, in)
					}
				}
			}
			if trial%2 == 0 && n > 0 {
				cu, cv := k.Project(r3.Scale(1.0/3, r3.Add(r3.Add(vs[0], vs[1]), vs[2])))
				// The centroid of the n pixel centres inside a convex
				// region differs from its true centroid by at most about
				// perimeter/n pixels (each boundary pixel moves the mean
				// by ≤ 1/n); we allow 2·perimeter/n.
				per := 0.0
				for e := 0; e < 3; e++ {
					per += math.Hypot(pu[(e+1)%3]-pu[e], pv[(e+1)%3]-pv[e])
				}
				tol := 2 * per / float64(n)
				if math.Abs(su/float64(n)-cu) > tol || math.Abs(sv/float64(n)-cv) > tol {
					t.Errorf("%s trial %d: coverage centroid (%.3f, %.3f), Project gives (%.3f, %.3f), tolerance %.3f", name, trial, su/float64(n), sv/float64(n), cu, cv, tol)
				}
			}
		}
	}
}

// oracle is the slow, obviously right renderer: for every pixel, the
// nearest hit of its centre ray over every face (Möller & Trumbore 1997),
// with near ≤ z ≤ far. ambiguous marks pixels whose result hinges on
// rounding: the ray within 1e−7 (barycentric) of a hit face's edge, two
// hits within 1e−9 m, or a hit within 1e−9 m of near or far.
func oracle(k mesh.Intrinsics, objs []Object, near, far float64, cullBack bool) (depth []float64, obj, tri []int32, ambiguous []bool) {
	n := k.Width * k.Height
	depth = make([]float64, n)
	obj = make([]int32, n)
	tri = make([]int32, n)
	ambiguous = make([]bool, n)
	for j := 0; j < k.Height; j++ {
		for i := 0; i < k.Width; i++ {
			p := j*k.Width + i
			d := k.Ray(float64(i), float64(j))
			best, second := math.Inf(1), math.Inf(1)
			obj[p], tri[p] = -1, -1
			for o, ob := range objs {
				for fi, f := range ob.Mesh.Faces {
					a := ob.ModelToCam.Apply(ob.Mesh.Vertices[f[0]])
					b := ob.ModelToCam.Apply(ob.Mesh.Vertices[f[1]])
					c := ob.ModelToCam.Apply(ob.Mesh.Vertices[f[2]])
					e1, e2 := r3.Sub(b, a), r3.Sub(c, a)
					if cullBack && r3.Dot(r3.Cross(e1, e2), a) > 0 {
						continue
					}
					pv := r3.Cross(d, e2)
					det := r3.Dot(e1, pv)
					if det == 0 {
						continue
					}
					tv := r3.Scale(-1, a)
					u := r3.Dot(tv, pv) / det
					qv := r3.Cross(tv, e1)
					v := r3.Dot(d, qv) / det
					z := r3.Dot(e2, qv) / det
					const eb = 1e-7
					if u < -eb || v < -eb || u+v > 1+eb || z < near-1e-9 || z > far+1e-9 {
						continue
					}
					if u < eb || v < eb || u+v > 1-eb || math.Abs(z-near) < 1e-9 || math.Abs(z-far) < 1e-9 {
						ambiguous[p] = true
					}
					if z < best {
						second, best = best, z
						obj[p], tri[p] = int32(o), int32(fi)
					} else if z < second {
						second = z
					}
				}
			}
			if second-best < 1e-9 {
				ambiguous[p] = true
			}
			if obj[p] >= 0 {
				depth[p] = best
			}
		}
	}
	return depth, obj, tri, ambiguous
}

// randomScene returns objects of random triangles of both windings, some
// crossing the near plane or the plane z = 0 and some wholly behind the
// camera, so that culling, clipping and occlusion are all exercised.
func randomScene(rng *rand.Rand, k mesh.Intrinsics, nobj, ntri int) []Object {
	var objs []Object
	for o := 0; o < nobj; o++ {
		m := &mesh.Mesh{}
		for f := 0; f < ntri; f++ {
			z := -0.5 + 3*rng.Float64()
			c := k.BackProject(float64(k.Width)*rng.Float64(), float64(k.Height)*rng.Float64(), math.Max(z, 0.2))
			c.Z = z
			s := 0.05 + 0.4*rng.Float64()
			base := uint32(len(m.Vertices))
			for v := 0; v < 3; v++ {
				m.Vertices = append(m.Vertices, r3.Add(c, r3.Vec{X: s * rng.NormFloat64(), Y: s * rng.NormFloat64(), Z: s * rng.NormFloat64()}))
			}
			m.Faces = append(m.Faces, mesh.Face{base, base + 1, base + 2})
		}
		// Model frame ≠ camera frame: rotate the mesh by R⁻¹ and place it
		// with R, so the camera-frame geometry is as drawn above.
		pose := mesh.PoseFromAxisAngle(r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}, rng.Float64()*3, r3.Vec{})
		m = m.Transform(pose.Inv())
		objs = append(objs, Object{Mesh: m, ModelToCam: pose, Color: mesh.RGB{R: uint8(50 * o), G: 200, B: 90}})
	}
	return objs
}

// TestAgainstRayCastOracle compares the fauxgl-based renderer with the
// brute-force ray caster on random scenes: the same face seen at every
// pixel that is not ambiguous at rounding level, and the same depth.
func TestAgainstRayCastOracle(t *testing.T) {
	k := mesh.Intrinsics{Width: 96, Height: 72, Fx: 80, Fy: 72, Cx: 43.2, Cy: 38.9}
	rng := rand.New(rand.NewPCG(7, 11))
	r, err := NewRenderer(k)
	if err != nil {
		t.Fatal(err)
	}
	for scene := 0; scene < 12; scene++ {
		objs := randomScene(rng, k, 3, 12)
		opt := DefaultOptions()
		if scene%3 == 1 {
			opt.Near, opt.Far = 0.6, 2.2
		}
		opt.CullBackFaces = scene%4 == 3
		f, err := r.Render(objs, opt)
		if err != nil {
			t.Fatal(err)
		}
		depth, obj, tri, amb := oracle(k, objs, opt.Near, opt.Far, opt.CullBackFaces)
		bad, seen, skipped := 0, 0, 0
		for p := range depth {
			if amb[p] {
				skipped++
				continue
			}
			if obj[p] >= 0 {
				seen++
			}
			// Depth agrees to float32 rounding of z (2^−24 relative),
			// the only difference between the two computations.
			if f.Object[p] != obj[p] || f.Triangle[p] != tri[p] || math.Abs(float64(f.Depth[p])-depth[p]) > 1e-7*math.Max(depth[p], 1) {
				bad++
				if bad <= 5 {
					t.Errorf("scene %d pixel (%d,%d): got obj %d tri %d z %v, oracle obj %d tri %d z %v",
						scene, p%k.Width, p/k.Width, f.Object[p], f.Triangle[p], f.Depth[p], obj[p], tri[p], depth[p])
				}
			}
		}
		if seen < 100 {
			t.Errorf("scene %d: only %d pixels see a surface; the test scene is too sparse", scene, seen)
		}
		if skipped > len(depth)/20 {
			t.Errorf("scene %d: %d ambiguous pixels, more than 5%%", scene, skipped)
		}
	}
}

// TestBehindCamera checks that a face wholly behind the camera draws
// nothing and one spanning z = 0 draws only its part beyond Near.
func TestBehindCamera(t *testing.T) {
	k := mesh.Intrinsics{Width: 64, Height: 48, Fx: 50, Fy: 50, Cx: 31.5, Cy: 23.5}
	behind := &mesh.Mesh{Vertices: []r3.Vec{{X: -1, Y: -1, Z: -1}, {X: 1, Y: -1, Z: -1}, {X: 0, Y: 1, Z: -1}}, Faces: []mesh.Face{{0, 1, 2}, {0, 2, 1}}}
	f, err := Render(k, []Object{{Mesh: behind, ModelToCam: mesh.Identity()}}, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	for p, z := range f.Depth {
		if z != 0 || f.Object[p] != -1 {
			t.Fatalf("face behind the camera seen at pixel %d (z = %v)", p, z)
		}
	}
	// A floor y = 0.2 stretching from z = −1 to z = 3: only z ≥ Near may
	// appear, below the horizon row (v > Cy).
	floor := &mesh.Mesh{Vertices: []r3.Vec{{X: -2, Y: 0.2, Z: -1}, {X: 2, Y: 0.2, Z: -1}, {X: 2, Y: 0.2, Z: 3}, {X: -2, Y: 0.2, Z: 3}}, Faces: []mesh.Face{{0, 1, 2}, {0, 2, 3}}}
	opt := DefaultOptions()
	opt.Near = 0.5
	f, err = Render(k, []Object{{Mesh: floor, ModelToCam: mesh.Identity()}}, opt)
	if err != nil {
		t.Fatal(err)
	}
	seen := 0
	for j := 0; j < k.Height; j++ {
		for i := 0; i < k.Width; i++ {
			z := float64(f.Depth[j*k.Width+i])
			if z == 0 {
				continue
			}
			seen++
			if z < opt.Near-1e-9 || float64(j) <= k.Cy {
				t.Errorf("pixel (%d,%d) sees the floor at z = %v (near %v)", i, j, z, opt.Near)
			}
			// The floor point on this ray: y = 0.2 ⇒ z = 0.2·Fy/(v − Cy).
			if want := 0.2 * k.Fy / (float64(j) - k.Cy); want <= 3 && want >= opt.Near && math.Abs(z-want) > 1e-6 {
				t.Errorf("pixel (%d,%d): floor depth %v, want %v", i, j, z, want)
			}
		}
	}
	if seen == 0 {
		t.Fatal("floor not seen")
	}
}

// TestNormalsAndCulling checks face normals (right-hand rule, turned to
// face the camera), interpolated vertex normals, and back-face culling.
func TestNormalsAndCulling(t *testing.T) {
	k := mesh.Intrinsics{Width: 64, Height: 48, Fx: 60, Fy: 60, Cx: 31.5, Cy: 23.5}
	tilt := mesh.PoseFromAxisAngle(r3.Vec{Y: 1}, 0.5, r3.Vec{Z: 1}) // quad turned 0.5 rad about y
	front := Object{Mesh: quadMesh(0.3, 0.3), ModelToCam: tilt}
	want := tilt.Rotate(r3.Vec{Z: -1})
	back := front
	back.Mesh = front.Mesh.Clone()
	for i, f := range back.Mesh.Faces {
		back.Mesh.Faces[i] = mesh.Face{f[0], f[2], f[1]}
	}
	for _, tc := range []struct {
		name     string
		obj      Object
		cull     bool
		wantSeen bool
	}{
		{"front", front, false, true},
		{"back", back, false, true},
		{"front culled", front, true, true},
		{"back culled", back, true, false},
	} {
		opt := DefaultOptions()
		opt.CullBackFaces = tc.cull
		f, err := Render(k, []Object{tc.obj}, opt)
		if err != nil {
			t.Fatal(err)
		}
		p := 23*k.Width + 31
		if seen := f.Depth[p] > 0; seen != tc.wantSeen {
			t.Fatalf("%s: centre seen = %v, want %v", tc.name, seen, tc.wantSeen)
		}
		if !tc.wantSeen {
			continue
		}
		if n := f.NormalAt(31, 23); r3.Norm(r3.Sub(n, want)) > 1e-6 {
			t.Errorf("%s: normal %v, want %v", tc.name, n, want)
		}
	}
	// Vertex normals: a sphere's normal at a pixel is the unit vector from
	// its centre to the surface point, to within the mesh's chordal
	// error; every normal faces the camera.
	const rad = 0.1
	s := icosphere(rad, 4)
	centre := r3.Vec{X: 0.02, Y: -0.01, Z: 0.6}
	f, err := Render(k, []Object{{Mesh: s, ModelToCam: translate(centre.X, centre.Y, centre.Z)}}, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	for j := 0; j < k.Height; j++ {
		for i := 0; i < k.Width; i++ {
			pt, ok := f.PointAt(i, j)
			if !ok {
				continue
			}
			n := f.NormalAt(i, j)
			if math.Abs(r3.Norm(n)-1) > 1e-6 || r3.Dot(n, k.Ray(float64(i), float64(j))) >= 0 {
				t.Fatalf("pixel (%d,%d): normal %v not unit or not facing the camera", i, j, n)
			}
			// Edge length of a 4-times subdivided icosahedron ≈ rad·1.05/16,
			// so interpolated normals are within a few 0.01 rad of the true
			// ones (the sphere's normal turns by edge/rad across a face).
			if a := math.Acos(math.Min(1, r3.Dot(n, mesh.Normalize(r3.Sub(pt, centre))))); a > 0.1 {
				t.Errorf("pixel (%d,%d): normal %.3f rad from the sphere's", i, j, a)
			}
		}
	}
}

// TestShadingLambert checks the colour against Lambert's cosine law:
// albedo·(ambient + diffuse·cos φ), φ the angle between normal and light.
func TestShadingLambert(t *testing.T) {
	k := mesh.Intrinsics{Width: 32, Height: 32, Fx: 40, Fy: 40, Cx: 15.5, Cy: 15.5}
	albedo := mesh.RGB{R: 200, G: 120, B: 40}
	for _, phi := range []float64{0, 0.3, 0.9, 1.3} {
		opt := DefaultOptions()
		opt.Specular = 0
		opt.LightDir = r3.Vec{Z: -1} // towards the camera
		pose := mesh.PoseFromAxisAngle(r3.Vec{X: 1}, phi, r3.Vec{Z: 1})
		f, err := Render(k, []Object{{Mesh: quadMesh(1, 1), ModelToCam: pose, Color: albedo}}, opt)
		if err != nil {
			t.Fatal(err)
		}
		c := f.Color.NRGBAAt(15, 15)
		s := opt.Ambient + opt.Diffuse*math.Cos(phi)
		for ch, got := range []uint8{c.R, c.G, c.B} {
			want := float64([]uint8{albedo.R, albedo.G, albedo.B}[ch]) * s
			if math.Abs(float64(got)-want) > 0.5+1e-9 { // rounding to 8 bits
				t.Errorf("φ=%v channel %d: got %d, want %.2f", phi, ch, got, want)
			}
		}
	}
	// Gain and white balance scale the channels; the background stays.
	opt := DefaultOptions()
	opt.Specular = 0
	opt.LightDir = r3.Vec{Z: -1}
	opt.Ambient, opt.Diffuse = 0.5, 0
	opt.Gain = 1.5
	opt.WhiteBalance = [3]float64{1, 0.5, 2}
	opt.Background = mesh.RGB{R: 1, G: 2, B: 3}
	m := quadMesh(0.1, 0.1)
	m.Colors = []mesh.RGB{{R: 100, G: 100, B: 60}, {R: 100, G: 100, B: 60}, {R: 100, G: 100, B: 60}, {R: 100, G: 100, B: 60}}
	f, err := Render(k, []Object{{Mesh: m, ModelToCam: translate(0, 0, 1)}}, opt)
	if err != nil {
		t.Fatal(err)
	}
	if c := f.Color.NRGBAAt(15, 15); c.R != 75 || c.G != 38 || c.B != 90 || c.A != 255 {
		t.Errorf("gain/white balance: got %v, want {75 38 90 255}", c)
	}
	if c := f.Color.NRGBAAt(0, 0); c.R != 1 || c.G != 2 || c.B != 3 || c.A != 255 {
		t.Errorf("background: got %v, want {1 2 3 255}", c)
	}
}

// TestRenderIntoReuse checks that reusing a frame and a renderer gives
// the same result as a fresh render (no stale pixels).
func TestRenderIntoReuse(t *testing.T) {
	k := mesh.Intrinsics{Width: 80, Height: 60, Fx: 70, Fy: 70, Cx: 40, Cy: 30}
	rng := rand.New(rand.NewPCG(3, 4))
	r, err := NewRenderer(k)
	if err != nil {
		t.Fatal(err)
	}
	dst := &Frame{}
	for i := 0; i < 3; i++ {
		objs := randomScene(rng, k, 2, 8)
		if err := r.RenderInto(dst, objs, DefaultOptions()); err != nil {
			t.Fatal(err)
		}
		fresh, err := Render(k, objs, DefaultOptions())
		if err != nil {
			t.Fatal(err)
		}
		if !framesEqual(dst, fresh) {
			t.Fatalf("scene %d: reused frame differs from a fresh render", i)
		}
	}
}

func framesEqual(a, b *Frame) bool {
	if a.Intr != b.Intr || string(a.Color.Pix) != string(b.Color.Pix) {
		return false
	}
	for i := range a.Depth {
		if a.Depth[i] != b.Depth[i] || a.Object[i] != b.Object[i] || a.Triangle[i] != b.Triangle[i] {
			return false
		}
	}
	for i := range a.Normal {
		if a.Normal[i] != b.Normal[i] {
			return false
		}
	}
	return true
}

func TestRenderErrors(t *testing.T) {
	k := mesh.Intrinsics{Width: 16, Height: 16, Fx: 20, Fy: 20, Cx: 7.5, Cy: 7.5}
	good := quadMesh(0.1, 0.1)
	nan := good.Clone()
	nan.Vertices[2].X = math.NaN()
	badFace := good.Clone()
	badFace.Faces[1][2] = 9
	badPose := translate(0, 0, math.Inf(1))
	opt := DefaultOptions()
	for _, tc := range []struct {
		name string
		objs []Object
		opt  func(*Options)
		want string
	}{
		{"nil mesh", []Object{{ModelToCam: mesh.Identity()}, {}}, nil, "object 0 has no mesh"},
		{"bad face", []Object{{Mesh: good, ModelToCam: mesh.Identity()}, {Mesh: badFace, ModelToCam: mesh.Identity()}}, nil, "object 1: mesh: face 1 references vertex 9"},
		{"nan vertex", []Object{{Mesh: nan, ModelToCam: translate(0, 0, 1)}}, nil, "object 0: vertex 2 is not finite"},
		{"bad pose", []Object{{Mesh: good, ModelToCam: badPose}}, nil, "object 0: ModelToCam pose is not finite"},
		{"near", nil, func(o *Options) { o.Near = 0 }, "Near = 0"},
		{"far", nil, func(o *Options) { o.Far = o.Near }, "want 0 < Near < Far"},
		{"gain", nil, func(o *Options) { o.Gain = -1 }, "option Gain = -1"},
		{"light", nil, func(o *Options) { o.LightDir.X = math.NaN() }, "LightDir"},
	} {
		o := opt
		if tc.opt != nil {
			tc.opt(&o)
		}
		_, err := Render(k, tc.objs, o)
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), "render: ") {
			t.Errorf("%s: error %v, want one containing %q", tc.name, err, tc.want)
		}
	}
	if _, err := NewRenderer(mesh.Intrinsics{Width: 0, Height: 10, Fx: 1, Fy: 1}); err == nil {
		t.Error("zero width accepted")
	}
	// No objects, and an empty mesh, draw an empty frame.
	f, err := Render(k, []Object{{Mesh: &mesh.Mesh{}, ModelToCam: mesh.Identity()}}, opt)
	if err != nil {
		t.Fatal(err)
	}
	for p := range f.Depth {
		if f.Depth[p] != 0 || f.Object[p] != -1 {
			t.Fatal("empty mesh drew something")
		}
	}
}

// TestNoCracksOnSharedEdges renders quads centred on the optical axis
// with a half-integer principal point, so that their diagonals pass
// exactly through pixel centres, where fauxgl's rounding alone can
// leave a crack; the repair in resolve must fill every such pixel with
// the nearer quad's depth.
func TestNoCracksOnSharedEdges(t *testing.T) {
	k := mesh.Intrinsics{Width: 120, Height: 100, Fx: 110, Fy: 110, Cx: 59.5, Cy: 49.5}
	for _, z := range []float64{0.5, 1, 1.01, 2.7} {
		objs := []Object{
			{Mesh: quadMesh(0.2, 0.2), ModelToCam: translate(0, 0, z)},
			{Mesh: quadMesh(10, 10), ModelToCam: translate(0, 0, z+0.3)},
		}
		f, err := Render(k, objs, DefaultOptions())
		if err != nil {
			t.Fatal(err)
		}
		for j := 0; j < k.Height; j++ {
			for i := 0; i < k.Width; i++ {
				X, Y := (float64(i)-k.Cx)*z/k.Fx, (float64(j)-k.Cy)*z/k.Fy
				want := z + 0.3
				if math.Abs(X) < 0.2 && math.Abs(Y) < 0.2 {
					want = z
				}
				if got := float64(f.Depth[j*k.Width+i]); math.Abs(got-want) > 1e-6 {
					t.Fatalf("z=%v: pixel (%d,%d) depth %v, want %v", z, i, j, got, want)
				}
			}
		}
	}
}

// TestSpecularPower checks the whole-number fast path of the highlight
// exponent against math.Pow.
func TestSpecularPower(t *testing.T) {
	for _, e := range []float64{0, 1, 2, 7, 32, 33.5, 100} {
		s := shading{opt: Options{Shininess: e}}
		for _, c := range []float64{0, 0.3, 0.9, 0.999, 1} {
			if got, want := s.pow(c), math.Pow(c, e); math.Abs(got-want) > 1e-12*math.Max(1, want) {
				t.Errorf("pow(%v, %v) = %v, want %v", c, e, got, want)
			}
		}
	}
}
