package mesh

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"syscall"
	"testing"
	"time"

	"gonum.org/v1/gonum/spatial/r3"
)

// ---- helpers (prefixed iso to keep the package's test namespace tidy)

type isoEdge struct{ a, b uint32 }

// isoTopology checks that m is a closed, consistently oriented
// 2-manifold mesh (every directed edge used once and its reverse used
// once, so every edge has exactly two triangles), that no vertex is
// unreferenced and no face repeats a vertex; open allows boundary edges
// (directed edges without a reverse). It returns the Euler
// characteristic V − E + F and the number of boundary edges.
func isoTopology(t *testing.T, m *Mesh, open bool) (euler, boundary int) {
	t.Helper()
	if err := m.Validate(); err != nil {
		t.Fatalf("invalid mesh: %v", err)
	}
	dir := make(map[isoEdge]int, 3*len(m.Faces))
	used := make([]bool, len(m.Vertices))
	for i, f := range m.Faces {
		if f[0] == f[1] || f[1] == f[2] || f[2] == f[0] {
			t.Fatalf("face %d %v repeats a vertex", i, f)
		}
		for k := 0; k < 3; k++ {
			used[f[k]] = true
			e := isoEdge{f[k], f[(k+1)%3]}
			if dir[e]++; dir[e] > 1 {
				t.Fatalf("directed edge %v used by two faces: inconsistent orientation or non-manifold edge", e)
			}
		}
	}
	for v, u := range used {
		if !u {
			t.Fatalf("vertex %d unreferenced", v)
		}
	}
	edges := 0
	for e := range dir {
		if _, ok := dir[isoEdge{e.b, e.a}]; ok {
			if e.a < e.b {
				edges++
			}
			continue
		}
		boundary++
		edges++
		if !open {
			t.Fatalf("edge %v has one triangle: the mesh has a crack", e)
		}
	}
	euler = len(m.Vertices) - edges + len(m.Faces)
	// Cross-check with the package's own edge analysis (metrics.go).
	if !m.IsConsistentlyOriented() || (!open && !m.IsWatertight() && len(m.Faces) > 0) {
		t.Fatalf("Mesh.IsConsistentlyOriented %v, Mesh.IsWatertight %v disagree with the edge count", m.IsConsistentlyOriented(), m.IsWatertight())
	}
	if got := m.EulerCharacteristic(); got != euler {
		t.Fatalf("Mesh.EulerCharacteristic %d, counted %d", got, euler)
	}
	return euler, boundary
}

// isoTriArea returns the area of face f.
func isoTriArea(m *Mesh, f Face) float64 {
	p, q, r := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
	return r3.Norm(r3.Cross(r3.Sub(q, p), r3.Sub(r, p))) / 2
}

func sphereSDF(c r3.Vec, r float64) func(r3.Vec) float64 {
	return func(p r3.Vec) float64 {
		d := r3.Sub(p, c)
		return math.Sqrt(d.X*d.X+d.Y*d.Y+d.Z*d.Z) - r
	}
}

// boxSDF is the exact signed distance of the box with centre c and
// half-sides hs.
func boxSDF(c, hs r3.Vec) func(r3.Vec) float64 {
	return func(p r3.Vec) float64 {
		d := r3.Sub(p, c)
		q := r3.Vec{X: math.Abs(d.X) - hs.X, Y: math.Abs(d.Y) - hs.Y, Z: math.Abs(d.Z) - hs.Z}
		out := r3.Norm(r3.Vec{X: math.Max(q.X, 0), Y: math.Max(q.Y, 0), Z: math.Max(q.Z, 0)})
		in := math.Min(math.Max(q.X, math.Max(q.Y, q.Z)), 0)
		return out + in
	}
}

// torusSDF is the signed distance of the torus about the z axis through
// c with tube centre radius R and tube radius r.
func torusSDF(c r3.Vec, R, r float64) func(r3.Vec) float64 {
	return func(p r3.Vec) float64 {
		d := r3.Sub(p, c)
		q := math.Hypot(d.X, d.Y) - R
		return math.Hypot(q, d.Z) - r
	}
}

func mustSample(t testing.TB, f func(r3.Vec) float64, col func(r3.Vec) RGB, lo, hi r3.Vec, h float64) *Grid {
	t.Helper()
	g, err := SampleGrid(f, col, lo, hi, h)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

func mustMarch(t testing.TB, g *Grid, iso float32) *Mesh {
	t.Helper()
	m, err := MarchingCubes(g, iso)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// sphereCentre is off the origin; sphereBox puts the lattice off the
// centre too, so that no lattice point lies exactly on the sphere (a
// centred lattice would put points such as (4, 8, 8)·r/12 on it) and no
// lattice symmetry makes the errors coincide.
var sphereCentre = r3.Vec{X: 0.0131, Y: -0.0217, Z: 0.0173}

// sphereBox returns a sampling box around the sphere with a margin of
// two spacings, its corner shifted off the centre by a fraction of h.
func sphereBox(r, h float64) (lo, hi r3.Vec) {
	pad := r + 2*h
	lo = r3.Sub(sphereCentre, r3.Vec{X: pad + 0.37*h, Y: pad + 0.21*h, Z: pad + 0.13*h})
	hi = r3.Add(sphereCentre, r3.Vec{X: pad, Y: pad, Z: pad})
	return lo, hi
}

// ---- sphere

// Tolerances for a sphere of radius r sampled with spacing h (our own
// derivation; the sphere's area 4πr² and volume 4πr³/3 are the handbook
// formulas):
//
// The field is the exact signed distance f(x) = |x − c| − r. Along a
// lattice edge that crosses the sphere every point is within h of the
// sphere, so |x − c| ≥ r − h there, and f” along any line is at most
// 1/|x − c| ≤ 1/(r − h) (the Hessian of |x| has eigenvalues 1/|x|, 1/|x|,
// 0). The linear interpolant L of f over an edge of length h then
// differs from f by at most h²/8 · 1/(r − h) (the interpolation error
// bound s(h − s)/2 · max|f”|), and at the vertex L = 0, so the vertex
// is within δ = h²/(8(r − h)) of the sphere.
//
// A point P of a triangle is a convex combination Σλᵢpᵢ of its
// vertices, all in one cell, so pairwise at most √3·h apart; then
// |P − c|² = Σλᵢ|pᵢ − c|² − Σᵢ<ⱼ λᵢλⱼ|pᵢ − pⱼ|² ≥ (r − δ)² − h² (as
// Σᵢ<ⱼ λᵢλⱼ ≤ 1/3), so |P − c| ≥ r − δ − h²/(r − δ); and |P − c| ≤ r + δ
// by convexity. The closed mesh therefore lies in the shell
// [r − ε, r + δ] with ε = δ + h²/(r − δ), and, enclosing the inner ball,
// its volume lies in [4π(r − ε)³/3, 4π(r + δ)³/3] and its area is at
// least 4π(r − ε)² (radial projection onto the inner sphere does not
// increase area and covers it). Both bounds shrink as O(h²/r).
//
// There is no such bound on the area from above (a surface in a thin
// shell can be wrinkled); there we rely on the triangle normals being
// O(h/r) accurate, which makes the excess area O(h²/r²) of 4πr², and
// allow 4πr²·(h/r)² (checked empirically well inside: see the log).
func sphereBounds(r, h float64) (vMin, vMax, aMin, aMax, delta float64) {
	delta = h * h / (8 * (r - h))
	eps := delta + h*h/(r-delta)
	vMin = 4 * math.Pi * math.Pow(r-eps, 3) / 3
	vMax = 4 * math.Pi * math.Pow(r+delta, 3) / 3
	aMin = 4 * math.Pi * (r - eps) * (r - eps)
	aMax = 4 * math.Pi * r * r * (1 + (h/r)*(h/r))
	return
}

func TestMarchingCubesSphere(t *testing.T) {
	const r = 1.0
	var prevVolErr, prevAreaErr float64
	for i, h := range []float64{r / 6, r / 12, r / 24} {
		lo, hi := sphereBox(r, h)
		g := mustSample(t, sphereSDF(sphereCentre, r), nil, lo, hi, h)
		m := mustMarch(t, g, 0)
		euler, _ := isoTopology(t, m, false)
		// A closed orientable surface of genus 0 has Euler
		// characteristic 2 (Euler's polyhedron formula).
		if euler != 2 {
			t.Errorf("h=%v: Euler characteristic %d, want 2", h, euler)
		}
		vol, area := m.SignedVolume(), m.Area()
		vMin, vMax, aMin, aMax, delta := sphereBounds(r, h)
		if vol < vMin || vol > vMax {
			t.Errorf("h=%v: volume %.6f outside [%.6f, %.6f] (4πr³/3 = %.6f)", h, vol, vMin, vMax, 4*math.Pi/3)
		}
		if area < aMin || area > aMax {
			t.Errorf("h=%v: area %.6f outside [%.6f, %.6f] (4πr² = %.6f)", h, area, aMin, aMax, 4*math.Pi)
		}
		for k, p := range m.Vertices {
			d := r3.Norm(r3.Sub(p, sphereCentre)) - r
			// δ bounds the error for exact values; storing them as
			// float32 (relative rounding 2⁻²⁴ on values ≤ 2h) moves a
			// vertex by far less than the 1e-6 allowed for it.
			if math.Abs(d) > delta+1e-6 {
				t.Fatalf("h=%v: vertex %d at distance %g from the sphere, bound %g", h, k, d, delta)
			}
		}
		volErr := math.Abs(vol - 4*math.Pi/3)
		areaErr := math.Abs(area - 4*math.Pi)
		t.Logf("h=r/%.0f: %d vertices, %d faces, volume %+.2e in [%+.2e, %+.2e], area %+.2e in [%+.2e, %+.2e] (relative to the exact values)",
			r/h, len(m.Vertices), len(m.Faces), vol-4*math.Pi/3, vMin-4*math.Pi/3, vMax-4*math.Pi/3, area-4*math.Pi, aMin-4*math.Pi, aMax-4*math.Pi)
		if i > 0 {
			// Halving h must reduce both errors (O(h²) convergence
			// predicts a factor near 4; we ask for at least 2).
			if volErr > prevVolErr/2 || areaErr > prevAreaErr/2 {
				t.Errorf("h=%v: errors %.3e, %.3e did not halve from %.3e, %.3e", h, volErr, areaErr, prevVolErr, prevAreaErr)
			}
		}
		prevVolErr, prevAreaErr = volErr, areaErr
	}
}

// TestMarchingCubesSphereNormals checks the vertex normals against the
// sphere's exact outward normal (x − c)/|x − c|. Central differences of
// the exact distance have an O(h²/r²) error and so does interpolating
// the gradient linearly over an edge; at h = r/12 we allow an angle of
// 2·(h/r)² + 1e-4 rad (the constant 2 is our own allowance for both
// terms together; the log shows the measured maximum).
func TestMarchingCubesSphereNormals(t *testing.T) {
	const r, h = 1.0, 1.0 / 12
	lo, hi := sphereBox(r, h)
	g := mustSample(t, sphereSDF(sphereCentre, r), nil, lo, hi, h)
	m := mustMarch(t, g, 0)
	maxAng := 0.0
	for i, n := range m.Normals {
		if math.Abs(r3.Norm(n)-1) > 1e-12 {
			t.Fatalf("normal %d has length %v", i, r3.Norm(n))
		}
		want := Normalize(r3.Sub(m.Vertices[i], sphereCentre))
		ang := math.Acos(math.Min(1, r3.Dot(n, want)))
		maxAng = math.Max(maxAng, ang)
	}
	tol := 2*(h/r)*(h/r) + 1e-4
	t.Logf("max normal angle error %.2e rad (tolerance %.2e)", maxAng, tol)
	if maxAng > tol {
		t.Errorf("max normal angle error %v > %v", maxAng, tol)
	}
	// Triangle orientation agrees with the vertex normals (outward).
	for i, f := range m.Faces {
		fn := m.FaceNormal(f)
		avg := r3.Add(r3.Add(m.Normals[f[0]], m.Normals[f[1]]), m.Normals[f[2]])
		if r3.Dot(fn, avg) <= 0 {
			t.Fatalf("face %d normal %v points against its vertex normals %v", i, fn, avg)
		}
	}
}

// ---- box

// TestMarchingCubesBox checks an axis-aligned box whose faces lie
// between lattice planes against its volume abc and area 2(ab + bc + ca)
// (handbook formulas).
//
// Tolerances (our derivation). Across a face, away from the box's edges
// and corners, the exact distance is linear along every lattice edge
// that crosses the face, so linear interpolation puts the vertex exactly
// on the face: the face is reproduced exactly (up to float32 storage of
// the values, checked below to 1e-6). Near an edge of the box, say where
// faces x = X and y = Y meet, the cross-section is a right-angle corner;
// let u = X − x_i, w = Y − y_j ∈ [0, h) be its offsets from the lattice
// lines just inside it. Only the vertices on those two lattice lines,
// inside the corner's cell, are off the faces, and both move inward
// (the inside endpoint's distance max(qx, qy) is nearer zero than qx,
// the outside one's Euclidean distance is larger than qx), so every
// vertex lies in the closed box and the mesh encloses at most abc. The
// contour then runs (X, y_j − h) → (β, y_j) → (x_i, γ) → (x_i − h, Y)
// with β ∈ [x_i, X], γ ∈ [y_j, Y] instead of along the corner, cutting
// off at most the quadrilateral (X, y_j − h), (X, Y), (x_i − h, Y),
// (x_i, y_j) of area uw + (u + w)h/2 < 2h². Its length is at least the
// chord, (u + w + 2h)/√2, and at most the sum of its three segments;
// against the corner path's u + w + 2h that changes the area per unit
// length of box edge by between −(2 − √2)·2h ≈ −1.17h and +0.42h (the
// maximum of √(u²+h²) + √(u²+w²) + √(h²+w²) − u − w − 2h on [0, h]², at
// u = h, w = 0). The cells around the 8 box corners (3³ each, where
// three faces meet) are bounded crudely: volume ≤ 27h³, and area
// ≤ 54h² each (≤ 2h² of mesh per cell, against ≤ 27h² of true surface).
// With 4(a + b + c) of edge:
//
//	−(8h²(a+b+c) + 216h³) ≤ ΔV ≤ 0,
//	−4.69h(a+b+c) − 432h² ≤ ΔA ≤ 1.66h(a+b+c) + 432h².
func TestMarchingCubesBox(t *testing.T) {
	hs := r3.Vec{X: 0.437, Y: 0.2913, Z: 0.3571}
	c := r3.Vec{X: 0.0123, Y: 0.0311, Z: -0.0207}
	a, b, cc := 2*hs.X, 2*hs.Y, 2*hs.Z
	wantV := a * b * cc
	wantA := 2 * (a*b + b*cc + cc*a)
	for _, h := range []float64{0.05, 0.025} {
		lo := r3.Sub(c, r3.Add(hs, r3.Vec{X: 2 * h, Y: 2 * h, Z: 2 * h}))
		hi := r3.Add(c, r3.Add(hs, r3.Vec{X: 2 * h, Y: 2 * h, Z: 2 * h}))
		g := mustSample(t, boxSDF(c, hs), nil, lo, hi, h)
		m := mustMarch(t, g, 0)
		euler, _ := isoTopology(t, m, false)
		if euler != 2 {
			t.Errorf("h=%v: Euler characteristic %d, want 2", h, euler)
		}
		s := a + b + cc
		vLo, vHi := -(8*h*h*s + 216*h*h*h), 1e-9
		aLo, aHi := -(4.69*h*s + 432*h*h), 1.66*h*s+432*h*h
		dV, dA := m.SignedVolume()-wantV, m.Area()-wantA
		t.Logf("h=%v: volume error %+.3e in [%+.3e, %+.3e], area error %+.3e in [%+.3e, %+.3e]", h, dV, vLo, vHi, dA, aLo, aHi)
		if dV < vLo || dV > vHi {
			t.Errorf("h=%v: volume error %v outside [%v, %v]", h, dV, vLo, vHi)
		}
		if dA < aLo || dA > aHi {
			t.Errorf("h=%v: area error %v outside [%v, %v]", h, dA, aLo, aHi)
		}
		inside, exact := 0, 0
		for _, p := range m.Vertices {
			d := r3.Sub(p, c)
			q := [3]float64{math.Abs(d.X) - hs.X, math.Abs(d.Y) - hs.Y, math.Abs(d.Z) - hs.Z}
			// Every vertex lies in the closed box (float32 storage of the
			// values moves a vertex by at most ~1e-7 here).
			if q[0] > 1e-6 || q[1] > 1e-6 || q[2] > 1e-6 {
				t.Fatalf("h=%v: vertex %v outside the box by %v", h, p, q)
			}
			inside++
			// A vertex more than 2h from the other two faces lies on its
			// face's plane.
			for ax := 0; ax < 3; ax++ {
				o1, o2 := q[(ax+1)%3], q[(ax+2)%3]
				if math.Abs(q[ax]) < h && o1 < -2*h && o2 < -2*h {
					exact++
					if math.Abs(q[ax]) > 1e-6 {
						t.Fatalf("h=%v: face vertex %v is %g off the face plane", h, p, q[ax])
					}
				}
			}
		}
		if exact == 0 {
			t.Fatal("no face vertices checked")
		}
	}
}

// ---- torus

// TestMarchingCubesTorus checks a torus: Euler characteristic 0 (genus
// 1), closed and oriented, and its volume 2π²Rr² and area 4π²Rr
// (Pappus's centroid theorems).
//
// Tolerances (our derivation, as for the sphere). The field is
// f = g − r with g the distance to the tube's centre circle. Its
// Hessian has eigenvalues 0, 1/g (in the meridian plane) and
// (ρ − R)/(ρ·g) (around the axis, ρ the distance to it, |·| ≤ 1/ρ), so
// within h of the surface f” along any line lies in [−M₋, M₊] with
// M₊ = max(1/(r − h), 1/(R − r − h)) and M₋ = 1/(R − r − h). A vertex is
// then within δ = M₊h²/8 of the surface, and a point P = Σλᵢpᵢ of a
// triangle has Σλᵢf(pᵢ) − M₊·h²/2 ≤ f(P) ≤ Σλᵢf(pᵢ) + M₋·h²/2 (Taylor
// with the Hessian bounds; Σλᵢ|pᵢ − P|² ≤ (√3h)²/3). The mesh lies
// between the tori of tube radii r − ε₋ and r + ε₊, ε₋ = δ + M₊h²/2,
// ε₊ = δ + M₋h²/2, so the volume is within their volumes. The area has
// the sphere test's allowance A·(h/r)².
func TestMarchingCubesTorus(t *testing.T) {
	const R, r, h = 0.7, 0.25, 0.025
	c := r3.Vec{X: 0.0131, Y: -0.0077, Z: 0.0093}
	ext := r3.Vec{X: R + r + 2*h, Y: R + r + 2*h, Z: r + 2*h}
	lo := r3.Sub(c, r3.Add(ext, r3.Vec{X: 0.31 * h, Y: 0.17 * h, Z: 0.23 * h}))
	g := mustSample(t, torusSDF(c, R, r), nil, lo, r3.Add(c, ext), h)
	m := mustMarch(t, g, 0)
	euler, _ := isoTopology(t, m, false)
	if euler != 0 {
		t.Errorf("Euler characteristic %d, want 0", euler)
	}
	mPlus := math.Max(1/(r-h), 1/(R-r-h))
	mMinus := 1 / (R - r - h)
	delta := mPlus * h * h / 8
	epsIn, epsOut := delta+mPlus*h*h/2, delta+mMinus*h*h/2
	torusV := func(rr float64) float64 { return 2 * math.Pi * math.Pi * R * rr * rr }
	wantV, wantA := torusV(r), 4*math.Pi*math.Pi*R*r
	vLo, vHi := torusV(r-epsIn)-wantV, torusV(r+epsOut)-wantV
	tolA := wantA * (h / r) * (h / r)
	dV, dA := m.SignedVolume()-wantV, m.Area()-wantA
	t.Logf("volume error %+.3e in [%+.3e, %+.3e], area error %+.3e (tol %.3e)", dV, vLo, vHi, dA, tolA)
	if dV < vLo || dV > vHi {
		t.Errorf("volume error %v outside [%v, %v]", dV, vLo, vHi)
	}
	if math.Abs(dA) > tolA {
		t.Errorf("area error %v, tolerance %v", dA, tolA)
	}
	for i, p := range m.Vertices {
		if d := torusSDF(c, R, r)(p); math.Abs(d) > delta+1e-6 {
			t.Fatalf("vertex %d is %g from the torus, bound %g", i, d, delta)
		}
	}
}

// ---- random fields

// noiseGrid returns an n³ grid of seeded uniform noise in [−1, 1], the
// border set to +1 (outside) so every isosurface closes inside it.
// nanRate > 0 makes that share of the interior values unknown.
func noiseGrid(seed uint64, n int, nanRate float64, colors bool) *Grid {
	rng := rand.New(rand.NewPCG(seed, 0x150))
	g := &Grid{Origin: r3.Vec{X: -0.5, Y: 0.25, Z: 1}, Spacing: 0.125, Nx: n, Ny: n + 1, Nz: n + 2}
	g.Values = make([]float32, g.Nx*g.Ny*g.Nz)
	if colors {
		g.Colors = make([]RGB, len(g.Values))
	}
	for k := 0; k < g.Nz; k++ {
		for j := 0; j < g.Ny; j++ {
			for i := 0; i < g.Nx; i++ {
				idx := i + g.Nx*(j+g.Ny*k)
				v := float32(1)
				if i > 0 && j > 0 && k > 0 && i < g.Nx-1 && j < g.Ny-1 && k < g.Nz-1 {
					v = float32(rng.Float64()*2 - 1)
					if rng.Float64() < nanRate {
						v = float32(math.NaN())
					}
				}
				g.Values[idx] = v
				if colors {
					g.Colors[idx] = RGB{uint8(rng.IntN(256)), uint8(rng.IntN(256)), uint8(rng.IntN(256))}
				}
			}
		}
	}
	return g
}

func TestMarchingCubesNoiseWatertight(t *testing.T) {
	ambiguous := 0
	tab, _ := mcTableOnce()
	for seed := uint64(1); seed <= 12; seed++ {
		g := noiseGrid(seed, 10, 0, seed%2 == 0)
		for _, iso := range []float32{0, 0.3, -0.45} {
			m := mustMarch(t, g, iso)
			isoTopology(t, m, false)
			for i, f := range m.Faces {
				// No lattice value equals iso, so no triangle is
				// degenerate.
				if a := isoTriArea(m, f); !(a > 0) {
					t.Fatalf("seed %d iso %v: face %d has area %v", seed, iso, i, a)
				}
			}
			// The border is outside, so the inside is a union of bounded
			// regions: the enclosed volume is positive.
			if vol := m.SignedVolume(); len(m.Faces) > 0 && !(vol > 0) {
				t.Errorf("seed %d iso %v: enclosed volume %v not positive", seed, iso, vol)
			}
		}
		ambiguous += countAmbiguousCells(g, 0, tab)
	}
	if ambiguous < 100 {
		t.Errorf("only %d cells with ambiguous faces: the noise does not exercise the decider", ambiguous)
	}
	t.Logf("%d cells with ambiguous faces", ambiguous)
}

func countAmbiguousCells(g *Grid, iso float32, tab *mcTable) int {
	n := 0
	for k := 0; k+1 < g.Nz; k++ {
		for j := 0; j+1 < g.Ny; j++ {
			for i := 0; i+1 < g.Nx; i++ {
				cs := 0
				for c := 0; c < 8; c++ {
					if g.Values[(i+c&1)+g.Nx*((j+c>>1&1)+g.Ny*(k+c>>2&1))] < iso {
						cs |= 1 << c
					}
				}
				if tab.amb[cs] != 0 {
					n++
				}
			}
		}
	}
	return n
}

// TestMarchingCubesAmbiguousConfigurations builds, for every corner case
// and every combination of asymptotic-decider outcomes on its ambiguous
// faces, corner values that realise it (random search over log-uniform
// magnitudes), puts that cell in the middle of a 4³ grid whose border is
// outside, and checks the mesh is closed and consistently oriented.
func TestMarchingCubesAmbiguousConfigurations(t *testing.T) {
	tab, err := mcTableOnce()
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(7, 11))
	tries := 3000
	if testing.Short() {
		tries = 300
	}
	reached, entries := 0, 0
	var missed []string
	for cs := 0; cs < 256; cs++ {
		amb := tab.amb[cs]
		for j := 0; j < 64; j++ {
			if uint8(j)&^amb != 0 {
				continue
			}
			entries++
			var vals [8]float32
			found := false
			for try := 0; try < tries && !found; try++ {
				for c := 0; c < 8; c++ {
					a := float32(math.Exp(-7 * rng.Float64()))
					if cs>>c&1 == 1 {
						a = -a
					}
					vals[c] = a
				}
				found = refJoined(vals, 0, tab.geom) == uint8(j)
			}
			if !found {
				missed = append(missed, fmt.Sprintf("%#02x/%#02x", cs, j))
				continue
			}
			reached++
			g := &Grid{Spacing: 1, Nx: 4, Ny: 4, Nz: 4, Values: make([]float32, 64)}
			for i := range g.Values {
				g.Values[i] = 1
			}
			for c := 0; c < 8; c++ {
				g.Values[(1+c&1)+4*((1+c>>1&1)+4*(1+c>>2&1))] = vals[c]
			}
			m := mustMarch(t, g, 0)
			isoTopology(t, m, false)
			if vol := m.SignedVolume(); cs != 0 && !(vol > 0) {
				t.Errorf("case %#02x joined %#02x: volume %v not positive", cs, j, vol)
			}
		}
	}
	t.Logf("realised %d of %d table entries; not reached: %v", reached, entries, missed)
	if testing.Short() {
		return
	}
	// Exactly the predicted entries are unreachable: see
	// checkerboardImpossible.
	var want []string
	for cs := 0; cs < 256; cs++ {
		for j := 0; j < 64; j++ {
			if uint8(j)&^tab.amb[cs] == 0 && checkerboardImpossible(cs, uint8(j)) {
				want = append(want, fmt.Sprintf("%#02x/%#02x", cs, j))
			}
		}
	}
	if !slices.Equal(missed, want) {
		t.Errorf("unreached entries %v, want exactly %v", missed, want)
	}
}

// checkerboardImpossible reports the decider outcomes no trilinear cell
// can produce (our own derivation). Only the two checkerboard cases
// (0x69, 0x96: every face ambiguous) constrain them: with
// Lc = log|v_c − iso| and s_c = +1 inside, −1 outside, face f is joined
// when D_f = Σ_{c∈f} s_c·Lc > 0; opposite faces partition the corners,
// so D_x0 + D_x1 = D_y0 + D_y1 = D_z0 + D_z1 = Σ_c s_c·Lc. Hence either
// every pair of opposite faces has a joined face or every pair has a
// separated one; the other 18 of the 64 outcomes are impossible. (The
// remaining 46 are all reached, which shows the constraint is the only
// one.)
func checkerboardImpossible(cs int, joined uint8) bool {
	if cs != 0x69 && cs != 0x96 {
		return false
	}
	allHaveJoined, allHaveSeparated := true, true
	for p := 0; p < 3; p++ {
		pair := joined >> (2 * p) & 3
		if pair == 0 {
			allHaveJoined = false
		}
		if pair == 3 {
			allHaveSeparated = false
		}
	}
	return !allHaveJoined && !allHaveSeparated
}

// refJoined is an independent asymptotic decider (Nielson & Hamann
// 1991): for each ambiguous face it evaluates the bilinear interpolant at
// its saddle point, (w00·w11 − w10·w01)/(w00 + w11 − w10 − w01), and
// calls the inside corners joined when that value is below iso.
func refJoined(vals [8]float32, iso float32, g *mcGeom) uint8 {
	var j uint8
	for f, fc := range g.faces {
		w := func(i int) float64 { return float64(vals[fc.q[i]]) - float64(iso) }
		in := func(i int) bool { return vals[fc.q[i]] < iso }
		if !(in(0) == in(2) && in(1) == in(3) && in(0) != in(1)) {
			continue
		}
		w00, w10, w11, w01 := w(0), w(1), w(2), w(3)
		saddle := (w00*w11 - w10*w01) / (w00 + w11 - w10 - w01)
		if saddle < 0 {
			j |= 1 << f
		}
	}
	return j
}

// ---- reference extraction

// refMarch is a slow, plain marching cubes over a dense grid: per cell
// it builds the triangles from first principles (cellTriangles, not the
// lookup table), with refJoined as decider, and shares vertices through
// a map keyed by the global lattice edge. It returns the triangles as
// position triples (positions computed as in the engine, so equal
// meshes compare exactly).
func refMarch(t *testing.T, g *Grid, iso float32) [][3]r3.Vec {
	geom := newMCGeom()
	type key struct{ i, j, k, a int }
	verts := map[key]r3.Vec{}
	val := func(i, j, k int) float32 { return g.Values[i+g.Nx*(j+g.Ny*k)] }
	vertex := func(i, j, k, a int) r3.Vec {
		kk := key{i, j, k, a}
		if p, ok := verts[kk]; ok {
			return p
		}
		d := [3]int{}
		d[a] = 1
		v0 := float64(val(i, j, k))
		v1 := float64(val(i+d[0], j+d[1], k+d[2]))
		tt := (float64(iso) - v0) / (v1 - v0)
		c := [3]float64{float64(i), float64(j), float64(k)}
		c[a] += tt
		p := r3.Vec{X: g.Origin.X + g.Spacing*c[0], Y: g.Origin.Y + g.Spacing*c[1], Z: g.Origin.Z + g.Spacing*c[2]}
		verts[kk] = p
		return p
	}
	var out [][3]r3.Vec
	for k := 0; k+1 < g.Nz; k++ {
		for j := 0; j+1 < g.Ny; j++ {
			for i := 0; i+1 < g.Nx; i++ {
				var vals [8]float32
				cs, unknown := 0, false
				for c := 0; c < 8; c++ {
					v := val(i+c&1, j+c>>1&1, k+c>>2&1)
					vals[c] = v
					if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
						unknown = true
					}
					if v < iso {
						cs |= 1 << c
					}
				}
				if unknown || cs == 0 || cs == 255 {
					continue
				}
				cell, err := geom.cellTriangles(cs, refJoined(vals, iso, geom))
				if err != nil {
					t.Fatal(err)
				}
				ev := func(e uint8) r3.Vec {
					ed := geom.edges[e]
					return vertex(i+int(ed.c0&1), j+int(ed.c0>>1&1), k+int(ed.c0>>2&1), int(ed.axis))
				}
				var centre r3.Vec
				if len(cell.centres) > 0 {
					var s r3.Vec
					n := 0.0
					for e := uint8(0); e < 12; e++ {
						if cell.centres[0]>>e&1 == 1 {
							s = r3.Add(s, ev(e))
							n++
						}
					}
					centre = r3.Scale(1/n, s)
				}
				for _, tr := range cell.tris {
					var p [3]r3.Vec
					for q, e := range tr {
						if e >= mcCentre {
							p[q] = centre
						} else {
							p[q] = ev(e)
						}
					}
					out = append(out, p)
				}
			}
		}
	}
	return out
}

func vecLess(a, b r3.Vec) int {
	switch {
	case a.X != b.X:
		return cmpF(a.X, b.X)
	case a.Y != b.Y:
		return cmpF(a.Y, b.Y)
	}
	return cmpF(a.Z, b.Z)
}

func cmpF(a, b float64) int {
	if a < b {
		return -1
	}
	if a > b {
		return 1
	}
	return 0
}

// canonTris rotates each triangle (keeping its orientation) to start at
// its least vertex and sorts the list.
func canonTris(ts [][3]r3.Vec) [][3]r3.Vec {
	out := slices.Clone(ts)
	for i, tr := range out {
		k := 0
		for q := 1; q < 3; q++ {
			if vecLess(tr[q], tr[k]) < 0 {
				k = q
			}
		}
		out[i] = [3]r3.Vec{tr[k], tr[(k+1)%3], tr[(k+2)%3]}
	}
	slices.SortFunc(out, func(a, b [3]r3.Vec) int {
		for q := 0; q < 3; q++ {
			if c := vecLess(a[q], b[q]); c != 0 {
				return c
			}
		}
		return 0
	})
	return out
}

func meshTris(m *Mesh) [][3]r3.Vec {
	out := make([][3]r3.Vec, len(m.Faces))
	for i, f := range m.Faces {
		out[i] = [3]r3.Vec{m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]}
	}
	return out
}

// TestMarchingCubesMatchesReference checks the tiled engine and its
// lookup table against refMarch, on noise with and without unknown
// values, for several grid sizes around multiples of BlockSize.
func TestMarchingCubesMatchesReference(t *testing.T) {
	for i, n := range []int{3, 8, 9, 15, 17} {
		for _, nan := range []float64{0, 0.08} {
			g := noiseGrid(uint64(100+i), n, nan, false)
			m := mustMarch(t, g, 0.1)
			_, boundary := isoTopology(t, m, nan > 0)
			if nan == 0 && boundary != 0 {
				t.Errorf("n=%d: %d boundary edges without unknown values", n, boundary)
			}
			// No duplicate vertices: every position is distinct (no
			// lattice value equals iso here).
			ps := slices.Clone(m.Vertices)
			slices.SortFunc(ps, vecLess)
			for k := 1; k < len(ps); k++ {
				if ps[k] == ps[k-1] {
					t.Fatalf("n=%d nan=%v: duplicate vertex at %v", n, nan, ps[k])
				}
			}
			got, want := canonTris(meshTris(m)), canonTris(refMarch(t, g, 0.1))
			if !slices.Equal(got, want) {
				t.Fatalf("n=%d nan=%v: engine gives %d triangles, reference %d, and they differ", n, nan, len(got), len(want))
			}
		}
	}
}

// ---- blocks

// splitBlocks cuts a dense grid into a map of BlockSize³ blocks whose
// lattice is the grid's shifted by off (lattice point (i, j, k) of the
// grid is point (i, j, k) + off of the blocks), dropping blocks with no
// known value; it returns them in map order.
func splitBlocks(g *Grid, off [3]int) *BlockVolume {
	blocks := map[BlockKey]*Block{}
	floorDiv := func(a int) int32 {
		if a < 0 {
			return int32(-((-a + BlockSize - 1) / BlockSize))
		}
		return int32(a / BlockSize)
	}
	for k := 0; k < g.Nz; k++ {
		for j := 0; j < g.Ny; j++ {
			for i := 0; i < g.Nx; i++ {
				v := g.Values[i+g.Nx*(j+g.Ny*k)]
				if math.IsNaN(float64(v)) {
					continue
				}
				p := [3]int{i + off[0], j + off[1], k + off[2]}
				key := BlockKey{floorDiv(p[0]), floorDiv(p[1]), floorDiv(p[2])}
				b := blocks[key]
				if b == nil {
					b = &Block{Key: key, Values: make([]float32, BlockValues)}
					for q := range b.Values {
						b.Values[q] = float32(math.NaN())
					}
					if g.Colors != nil {
						b.Colors = make([]RGB, BlockValues)
					}
					blocks[key] = b
				}
				x := p[0] - int(key.X)*BlockSize
				y := p[1] - int(key.Y)*BlockSize
				z := p[2] - int(key.Z)*BlockSize
				b.Values[x+BlockSize*(y+BlockSize*z)] = v
				if g.Colors != nil {
					b.Colors[x+BlockSize*(y+BlockSize*z)] = g.Colors[i+g.Nx*(j+g.Ny*k)]
				}
			}
		}
	}
	v := &BlockVolume{
		Origin:  r3.Sub(g.Origin, r3.Scale(g.Spacing, r3.Vec{X: float64(off[0]), Y: float64(off[1]), Z: float64(off[2])})),
		Spacing: g.Spacing,
	}
	for _, b := range blocks { // map order: deliberately unordered
		v.Blocks = append(v.Blocks, *b)
	}
	return v
}

// sameMesh checks that a and b have the same vertices (positions within
// tol, normals within tol, equal colours) and the same oriented
// triangles, whatever their order.
func sameMesh(t *testing.T, a, b *Mesh, tol float64) {
	t.Helper()
	if len(a.Vertices) != len(b.Vertices) || len(a.Faces) != len(b.Faces) {
		t.Fatalf("sizes differ: %d/%d vertices, %d/%d faces", len(a.Vertices), len(b.Vertices), len(a.Faces), len(b.Faces))
	}
	order := func(m *Mesh) []int {
		idx := make([]int, len(m.Vertices))
		for i := range idx {
			idx[i] = i
		}
		q := func(x float64) float64 { return math.Round(x / tol / 16) }
		slices.SortFunc(idx, func(i, j int) int {
			p, r := m.Vertices[i], m.Vertices[j]
			return vecLess(r3.Vec{X: q(p.X), Y: q(p.Y), Z: q(p.Z)}, r3.Vec{X: q(r.X), Y: q(r.Y), Z: q(r.Z)})
		})
		return idx
	}
	oa, ob := order(a), order(b)
	bToA := make([]uint32, len(b.Vertices))
	for k := range oa {
		i, j := oa[k], ob[k]
		if d := r3.Norm(r3.Sub(a.Vertices[i], b.Vertices[j])); d > tol {
			t.Fatalf("vertex %v has no match (nearest in order %v, %g away)", a.Vertices[i], b.Vertices[j], d)
		}
		if d := r3.Norm(r3.Sub(a.Normals[i], b.Normals[j])); d > tol {
			t.Fatalf("vertex %v: normals %v and %v differ", a.Vertices[i], a.Normals[i], b.Normals[j])
		}
		if (a.Colors == nil) != (b.Colors == nil) || (a.Colors != nil && a.Colors[i] != b.Colors[j]) {
			t.Fatalf("vertex %v: colours differ", a.Vertices[i])
		}
		bToA[j] = uint32(i)
	}
	canon := func(fs []Face, mp func(uint32) uint32) []Face {
		out := make([]Face, len(fs))
		for i, f := range fs {
			g := Face{mp(f[0]), mp(f[1]), mp(f[2])}
			k := 0
			for q := 1; q < 3; q++ {
				if g[q] < g[k] {
					k = q
				}
			}
			out[i] = Face{g[k], g[(k+1)%3], g[(k+2)%3]}
		}
		slices.SortFunc(out, func(x, y Face) int {
			for q := 0; q < 3; q++ {
				if x[q] != y[q] {
					return int(int64(x[q]) - int64(y[q]))
				}
			}
			return 0
		})
		return out
	}
	fa := canon(a.Faces, func(i uint32) uint32 { return i })
	fb := canon(b.Faces, func(i uint32) uint32 { return bToA[i] })
	if !slices.Equal(fa, fb) {
		t.Fatal("same vertices, different triangles")
	}
}

// TestMarchBlocksMatchesDense splits dense fields into 8³ blocks kept
// in a map (so the block list arrives in random order) and checks that
// MarchBlocks gives the dense extraction: identical output when the
// blocks line up with the grid's tiles, the same mesh up to ordering
// when they are shifted (negative keys included), closed across block
// borders in both cases.
func TestMarchBlocksMatchesDense(t *testing.T) {
	sphere := mustSample(t, sphereSDF(sphereCentre, 0.8), func(p r3.Vec) RGB {
		return RGB{uint8(128 + 100*p.X), uint8(128 + 100*p.Y), uint8(128 + 100*p.Z)}
	}, r3.Vec{X: -1, Y: -1, Z: -1}, r3.Vec{X: 1, Y: 1, Z: 1}, 0.07)
	cases := []struct {
		name string
		g    *Grid
		open bool
	}{
		{"sphere", sphere, false},
		{"noise", noiseGrid(5, 19, 0, true), false},
		{"noise-unknown", noiseGrid(6, 21, 0.05, false), true},
	}
	for _, tc := range cases {
		dense := mustMarch(t, tc.g, 0)
		for _, off := range [][3]int{{0, 0, 0}, {-13, 5, -20}, {3, -1, 7}} {
			bv := splitBlocks(tc.g, off)
			workerCounts := []int{1, 3}
			if off != [3]int{} {
				workerCounts = []int{2}
			}
			for _, workers := range workerCounts {
				got, err := MarchBlocks(bv, 0, IsoOptions{Workers: workers})
				if err != nil {
					t.Fatal(err)
				}
				_, boundary := isoTopology(t, got, tc.open)
				if !tc.open && boundary != 0 {
					t.Fatalf("%s %v: %d boundary edges", tc.name, off, boundary)
				}
				if off == [3]int{} {
					if !meshEqual(dense, got) {
						t.Fatalf("%s: aligned blocks (workers %d) do not give the dense output exactly", tc.name, workers)
					}
					continue
				}
				// Shifting the lattice changes rounding of positions by
				// a few ulps of the coordinates (≤ 1e-12 here).
				sameMesh(t, dense, got, 1e-12)
			}
		}
	}
}

// TestMarchBlocksFarKeys shifts a field to block coordinates near
// ±MaxBlockCoord: the result is the same mesh (positions agree to the
// float64 rounding of coordinates near 8·10⁶ spacings, ≈ 1e-9 spacings).
func TestMarchBlocksFarKeys(t *testing.T) {
	g := noiseGrid(77, 13, 0, false)
	dense := mustMarch(t, g, 0)
	for _, off := range [][3]int{
		{-MaxBlockCoord * BlockSize, MaxBlockCoord*BlockSize - 3*BlockSize, 5},
		{MaxBlockCoord*BlockSize - 3*BlockSize, 1, -MaxBlockCoord * BlockSize},
	} {
		got, err := MarchBlocks(splitBlocks(g, off), 0, IsoOptions{})
		if err != nil {
			t.Fatal(err)
		}
		isoTopology(t, got, false)
		sameMesh(t, dense, got, 1e-6)
	}
}

func meshEqual(a, b *Mesh) bool {
	return slices.Equal(a.Vertices, b.Vertices) && slices.Equal(a.Normals, b.Normals) &&
		slices.Equal(a.Colors, b.Colors) && slices.Equal(a.Faces, b.Faces)
}

// TestMarchWorkersDeterministic checks that the output does not depend
// on the number of workers.
func TestMarchWorkersDeterministic(t *testing.T) {
	g := noiseGrid(42, 30, 0.02, true)
	ref, err := MarchGrid(g, 0, IsoOptions{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	for _, w := range []int{2, 3, 5, 16} {
		m, err := MarchGrid(g, 0, IsoOptions{Workers: w})
		if err != nil {
			t.Fatal(err)
		}
		if !meshEqual(ref, m) {
			t.Fatalf("workers=%d: output differs from workers=1", w)
		}
	}
}

// ---- unknown values, equal-to-iso values, colours, edge cases

// TestMarchingCubesUnknownOpensSurface puts one unknown value next to a
// sphere's surface: the eight cells around it are skipped, the mesh
// stays manifold and consistently oriented, and every boundary edge
// lies on a face of a skipped cell.
func TestMarchingCubesUnknownOpensSurface(t *testing.T) {
	const h = 0.1
	g := mustSample(t, sphereSDF(r3.Vec{}, 0.73), nil, r3.Vec{X: -1, Y: -1, Z: -1}, r3.Vec{X: 1, Y: 1, Z: 1}, h)
	// The lattice point nearest (0.73, 0, 0).
	pi, pj, pk := int(math.Round((0.73+1)/h)), int(math.Round(1/h)), int(math.Round(1/h))
	g.Values[pi+g.Nx*(pj+g.Ny*pk)] = float32(math.NaN())
	m := mustMarch(t, g, 0)
	_, boundary := isoTopology(t, m, true)
	if boundary == 0 {
		t.Fatal("no boundary: the unknown value did not open the surface")
	}
	// Vertices on the boundary lie on lattice edges of the skipped
	// cells, i.e. within one spacing of the unknown point along each axis.
	unknown := r3.Vec{X: -1 + h*float64(pi), Y: -1 + h*float64(pj), Z: -1 + h*float64(pk)}
	dir := map[isoEdge]bool{}
	for _, f := range m.Faces {
		for k := 0; k < 3; k++ {
			dir[isoEdge{f[k], f[(k+1)%3]}] = true
		}
	}
	for e := range dir {
		if dir[isoEdge{e.b, e.a}] {
			continue
		}
		for _, v := range []uint32{e.a, e.b} {
			d := r3.Sub(m.Vertices[v], unknown)
			if math.Abs(d.X) > h+1e-9 || math.Abs(d.Y) > h+1e-9 || math.Abs(d.Z) > h+1e-9 {
				t.Fatalf("boundary vertex %v not on a skipped cell", m.Vertices[v])
			}
		}
	}
	t.Logf("%d boundary edges", boundary)
}

// TestMarchingCubesEqualToIso samples a sphere whose radius puts lattice
// points exactly on it (values exactly iso, counted as outside): the
// mesh must stay closed and oriented; triangles of zero area are allowed
// there and only there.
func TestMarchingCubesEqualToIso(t *testing.T) {
	// Integer lattice, radius 5: (±5, 0, 0) etc. and (3, 4, 0) etc. have
	// distance exactly 0 in float64 and float32.
	g := mustSample(t, sphereSDF(r3.Vec{}, 5), nil, r3.Vec{X: -7, Y: -7, Z: -7}, r3.Vec{X: 7, Y: 7, Z: 7}, 1)
	zeros := 0
	for _, v := range g.Values {
		if v == 0 {
			zeros++
		}
	}
	if zeros == 0 {
		t.Fatal("no lattice value equals iso")
	}
	m := mustMarch(t, g, 0)
	euler, _ := isoTopology(t, m, false)
	if euler != 2 {
		t.Errorf("Euler characteristic %d, want 2", euler)
	}
	onLattice := func(p r3.Vec) bool {
		return p.X == math.Round(p.X) && p.Y == math.Round(p.Y) && p.Z == math.Round(p.Z)
	}
	degenerate := 0
	for i, f := range m.Faces {
		if isoTriArea(m, f) == 0 {
			degenerate++
			if !onLattice(m.Vertices[f[0]]) && !onLattice(m.Vertices[f[1]]) && !onLattice(m.Vertices[f[2]]) {
				t.Fatalf("face %d has zero area away from any equal-to-iso lattice point", i)
			}
		}
	}
	if vol := m.SignedVolume(); !(vol > 0) {
		t.Errorf("volume %v not positive", vol)
	}
	t.Logf("%d lattice values equal iso, %d zero-area triangles", zeros, degenerate)
}

// TestMarchingCubesColors samples a colour that is linear in position:
// linear interpolation along an edge reproduces it, so each vertex
// colour is the colour function at the vertex up to rounding (±0.5 at
// the lattice points and ±0.5 at the vertex: ±1).
func TestMarchingCubesColors(t *testing.T) {
	col := func(p r3.Vec) float64 { return 100 + 80*p.X - 50*p.Y + 30*p.Z }
	g := mustSample(t, sphereSDF(sphereCentre, 0.6), func(p r3.Vec) RGB {
		c := uint8(math.Round(col(p)))
		return RGB{c, 255 - c, 7}
	}, r3.Vec{X: -0.8, Y: -0.8, Z: -0.8}, r3.Vec{X: 0.8, Y: 0.8, Z: 0.8}, 0.1)
	m := mustMarch(t, g, 0)
	if len(m.Colors) != len(m.Vertices) {
		t.Fatalf("%d colours for %d vertices", len(m.Colors), len(m.Vertices))
	}
	for i, c := range m.Colors {
		if len(m.Faces) == 0 {
			break
		}
		want := col(m.Vertices[i])
		if math.Abs(float64(c.R)-want) > 1 || int(c.R)+int(c.G) != 255 || c.B != 7 {
			// Centre vertices average their loop: still linear, so the
			// same bound holds.
			t.Fatalf("vertex %d at %v: colour %v, want R≈%.2f", i, m.Vertices[i], c, want)
		}
	}
}

func TestMarchingCubesEmptyAndErrors(t *testing.T) {
	// No crossing: empty mesh, no error.
	g := &Grid{Spacing: 1, Nx: 3, Ny: 3, Nz: 3, Values: make([]float32, 27)}
	for i := range g.Values {
		g.Values[i] = 2
	}
	m, err := MarchingCubes(g, 0)
	if err != nil || len(m.Vertices) != 0 || len(m.Faces) != 0 {
		t.Fatalf("uniform grid: %v, %d vertices, %d faces", err, len(m.Vertices), len(m.Faces))
	}
	// Flat grids have no cells.
	for _, d := range [][3]int{{0, 0, 0}, {1, 5, 5}, {5, 5, 1}} {
		g := &Grid{Spacing: 1, Nx: d[0], Ny: d[1], Nz: d[2], Values: make([]float32, d[0]*d[1]*d[2])}
		for i := range g.Values {
			g.Values[i] = float32(i%2) - 0.5
		}
		m, err := MarchingCubes(g, 0)
		if err != nil || len(m.Faces) != 0 {
			t.Errorf("%v grid: %v, %d faces", d, err, len(m.Faces))
		}
	}
	nan := math.NaN()
	bad := []struct {
		name string
		g    *Grid
		iso  float32
		want string
	}{
		{"nil", nil, 0, "nil grid"},
		{"short", &Grid{Spacing: 1, Nx: 2, Ny: 2, Nz: 2, Values: make([]float32, 7)}, 0, "needs 8 values, has 7"},
		{"colours", &Grid{Spacing: 1, Nx: 2, Ny: 2, Nz: 2, Values: make([]float32, 8), Colors: make([]RGB, 3)}, 0, "needs 8 colours, has 3"},
		{"negative", &Grid{Spacing: 1, Nx: -2, Ny: 2, Nz: 2}, 0, "each side must be"},
		{"huge", &Grid{Spacing: 1, Nx: 1 << 40, Ny: 1 << 40, Nz: 1 << 40}, 0, "each side must be"},
		{"spacing", &Grid{Spacing: 0, Nx: 2, Ny: 2, Nz: 2, Values: make([]float32, 8)}, 0, "spacing"},
		{"spacing-nan", &Grid{Spacing: nan, Nx: 2, Ny: 2, Nz: 2, Values: make([]float32, 8)}, 0, "spacing"},
		{"origin", &Grid{Origin: r3.Vec{X: nan}, Spacing: 1, Nx: 2, Ny: 2, Nz: 2, Values: make([]float32, 8)}, 0, "origin"},
		{"iso", &Grid{Spacing: 1, Nx: 2, Ny: 2, Nz: 2, Values: make([]float32, 8)}, float32(math.Inf(1)), "iso level"},
	}
	for _, tc := range bad {
		_, err := MarchingCubes(tc.g, tc.iso)
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), "mesh: ") {
			t.Errorf("%s: got error %v, want one containing %q", tc.name, err, tc.want)
		}
	}
	vals := make([]float32, BlockValues)
	badBlocks := []struct {
		name string
		v    *BlockVolume
		want string
	}{
		{"nil", nil, "nil block volume"},
		{"dup", &BlockVolume{Spacing: 1, Blocks: []Block{{Key: BlockKey{1, 2, 3}, Values: vals}, {Key: BlockKey{1, 2, 3}, Values: vals}}}, "listed twice"},
		{"short", &BlockVolume{Spacing: 1, Blocks: []Block{{Values: vals[:10]}}}, "has 10 values"},
		{"colours", &BlockVolume{Spacing: 1, Blocks: []Block{{Values: vals, Colors: make([]RGB, 5)}}}, "has 5 colours"},
		{"mixed", &BlockVolume{Spacing: 1, Blocks: []Block{{Values: vals, Colors: make([]RGB, BlockValues)}, {Key: BlockKey{X: 1}, Values: vals}}}, "every block"},
		{"far", &BlockVolume{Spacing: 1, Blocks: []Block{{Key: BlockKey{Z: MaxBlockCoord + 1}, Values: vals}}}, "beyond"},
		{"spacing", &BlockVolume{Spacing: -1}, "spacing"},
	}
	for _, tc := range badBlocks {
		_, err := MarchBlocks(tc.v, 0, IsoOptions{})
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), "mesh: ") {
			t.Errorf("blocks %s: got error %v, want one containing %q", tc.name, err, tc.want)
		}
	}
	m, err = MarchBlocks(&BlockVolume{Spacing: 1}, 0, IsoOptions{})
	if err != nil || len(m.Faces) != 0 {
		t.Errorf("no blocks: %v, %d faces", err, len(m.Faces))
	}
}

// ---- SampleGrid

func TestSampleGrid(t *testing.T) {
	f := func(p r3.Vec) float64 { return p.X + 10*p.Y + 100*p.Z }
	g, err := SampleGrid(f, func(p r3.Vec) RGB { return RGB{R: uint8(10 * p.X)} },
		r3.Vec{X: -1, Y: 0, Z: 2}, r3.Vec{X: 1, Y: 0.45, Z: 2}, 0.25)
	if err != nil {
		t.Fatal(err)
	}
	// x: −1…1 in 8 steps → 9 points; y: 0…0.45 needs ⌈1.8⌉ = 2 steps →
	// 3 points (last at 0.5 ≥ 0.45); z: a single plane.
	if g.Nx != 9 || g.Ny != 3 || g.Nz != 1 || len(g.Values) != 27 || len(g.Colors) != 27 {
		t.Fatalf("got %d×%d×%d, %d values, %d colours", g.Nx, g.Ny, g.Nz, len(g.Values), len(g.Colors))
	}
	for j := 0; j < g.Ny; j++ {
		for i := 0; i < g.Nx; i++ {
			p := r3.Vec{X: -1 + 0.25*float64(i), Y: 0.25 * float64(j), Z: 2}
			if got, want := g.Values[i+g.Nx*j], float32(f(p)); got != want {
				t.Fatalf("value at (%d,%d): %v, want %v", i, j, got, want)
			}
		}
	}
	errCases := []struct {
		lo, hi r3.Vec
		h      float64
		want   string
	}{
		{r3.Vec{}, r3.Vec{X: 1, Y: 1, Z: 1}, 0, "spacing"},
		{r3.Vec{}, r3.Vec{X: 1, Y: 1, Z: 1}, math.Inf(1), "spacing"},
		{r3.Vec{X: 1}, r3.Vec{}, 0.1, "inverted"},
		{r3.Vec{}, r3.Vec{X: math.NaN()}, 0.1, "not finite"},
		{r3.Vec{}, r3.Vec{X: 1, Y: 1, Z: 1}, 1e-3, "more than"},
		{r3.Vec{}, r3.Vec{X: 1e300, Y: 1e300, Z: 1e300}, 1e-300, "more than"},
	}
	for _, tc := range errCases {
		_, err := SampleGrid(f, nil, tc.lo, tc.hi, tc.h)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("SampleGrid(%v, %v, %v): error %v, want %q", tc.lo, tc.hi, tc.h, err, tc.want)
		}
	}
	if _, err := SampleGrid(nil, nil, r3.Vec{}, r3.Vec{}, 1); err == nil {
		t.Error("nil field accepted")
	}
}

// ---- benchmarks

// cpuTime returns the process's user + system CPU time, so benchmarks
// can report CPU per operation, which (unlike wall time) stays
// meaningful when other processes share the cores.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

func benchSphereGrid(b *testing.B, n int) *Grid {
	h := 2.0 / float64(n-1)
	g, err := SampleGrid(sphereSDF(sphereCentre, 0.8), nil, r3.Vec{X: -1, Y: -1, Z: -1}, r3.Vec{X: 1, Y: 1, Z: 1}, h)
	if err != nil {
		b.Fatal(err)
	}
	return g
}

// BenchmarkMarchingCubesSphere128 extracts a sphere from a dense 128³
// grid and reports cells per second.
func BenchmarkMarchingCubesSphere128(b *testing.B) {
	g := benchSphereGrid(b, 128)
	cells := float64((g.Nx - 1) * (g.Ny - 1) * (g.Nz - 1))
	b.ResetTimer()
	var faces int
	cpu0 := cpuTime()
	for i := 0; i < b.N; i++ {
		m, err := MarchingCubes(g, 0)
		if err != nil {
			b.Fatal(err)
		}
		faces = len(m.Faces)
	}
	b.ReportMetric(float64(cpuTime()-cpu0)/float64(b.N)/1e6, "cpu-ms/op")
	b.ReportMetric(cells*float64(b.N)/b.Elapsed().Seconds(), "cells/s")
	b.ReportMetric(float64(faces), "faces")
}

// BenchmarkMarchBlocksSphereBand extracts the same sphere from only the
// 8³ blocks within a TSDF-like band of ±3 voxels around the surface
// (values NaN beyond it), the layout a sparse-block TSDF hands over.
func BenchmarkMarchBlocksSphereBand(b *testing.B) {
	g := benchSphereGrid(b, 128)
	band := float32(3 * g.Spacing)
	for i, v := range g.Values {
		if v > band || v < -band {
			g.Values[i] = float32(math.NaN())
		}
	}
	bv := splitBlocks(g, [3]int{0, 0, 0})
	cells := float64(len(bv.Blocks) * BlockValues)
	b.ResetTimer()
	var faces int
	cpu0 := cpuTime()
	for i := 0; i < b.N; i++ {
		m, err := MarchBlocks(bv, 0, DefaultIsoOptions())
		if err != nil {
			b.Fatal(err)
		}
		faces = len(m.Faces)
	}
	b.ReportMetric(float64(cpuTime()-cpu0)/float64(b.N)/1e6, "cpu-ms/op")
	b.ReportMetric(cells*float64(b.N)/b.Elapsed().Seconds(), "cells/s")
	b.ReportMetric(float64(len(bv.Blocks)), "blocks")
	b.ReportMetric(float64(faces), "faces")
}

// BenchmarkMarchBlocksPartBand is sized like a large part in a
// block-hashed TSDF: a sphere of radius 120 voxels (240 mm across at
// 1 mm voxels), with colour, in the blocks that hold a voxel within the
// truncation band of ±4 voxels (values NaN elsewhere, as unobserved).
func BenchmarkMarchBlocksPartBand(b *testing.B) {
	const r, band = 120.0, 4.0
	c := r3.Vec{X: 0.31, Y: -0.17, Z: 0.23}
	bv := &BlockVolume{Spacing: 0.001}
	nb := int(math.Ceil((r+band)/BlockSize)) + 1
	for bz := -nb; bz < nb; bz++ {
		for by := -nb; by < nb; by++ {
			for bx := -nb; bx < nb; bx++ {
				blk := Block{Key: BlockKey{int32(bx), int32(by), int32(bz)},
					Values: make([]float32, BlockValues), Colors: make([]RGB, BlockValues)}
				keep := false
				for i := range blk.Values {
					p := r3.Vec{
						X: float64(bx*BlockSize + i%BlockSize),
						Y: float64(by*BlockSize + i/BlockSize%BlockSize),
						Z: float64(bz*BlockSize + i/(BlockSize*BlockSize)),
					}
					d := r3.Norm(r3.Sub(p, c)) - r
					if math.Abs(d) > band {
						blk.Values[i] = float32(math.NaN())
						continue
					}
					keep = true
					blk.Values[i] = float32(d)
					blk.Colors[i] = RGB{uint8(p.X), uint8(p.Y), uint8(p.Z)}
				}
				if keep {
					bv.Blocks = append(bv.Blocks, blk)
				}
			}
		}
	}
	cells := float64(len(bv.Blocks) * BlockValues)
	b.ResetTimer()
	var faces int
	cpu0 := cpuTime()
	for i := 0; i < b.N; i++ {
		m, err := MarchBlocks(bv, 0, DefaultIsoOptions())
		if err != nil {
			b.Fatal(err)
		}
		faces = len(m.Faces)
	}
	b.ReportMetric(float64(cpuTime()-cpu0)/float64(b.N)/1e6, "cpu-ms/op")
	b.ReportMetric(cells*float64(b.N)/b.Elapsed().Seconds(), "cells/s")
	b.ReportMetric(float64(len(bv.Blocks)), "blocks")
	b.ReportMetric(float64(faces), "faces")
}

func BenchmarkSampleGridSphere128(b *testing.B) {
	for i := 0; i < b.N; i++ {
		benchSphereGrid(b, 128)
	}
}
