package parts

import (
	"math"
	"math/rand/v2"
	"testing"
)

// near reports |got − want| ≤ tol.
func near(got, want, tol float64) bool { return math.Abs(got-want) <= tol }

// Hand-picked points with distances worked out by hand from the
// definition of Euclidean distance (nearest face, edge or corner).
// Tolerance 1e-12: a few float64 operations on values of order 1.
func TestBoxHandPicked(t *testing.T) {
	// Box centred at (1, 2, 3), half-sizes (1, 2, 3).
	tests := []struct {
		x, y, z, want float64
	}{
		{1, 2, 3, -1},           // centre: nearest face is 1 away (x)
		{1.5, 2, 3, -0.5},       // inside, toward +x face
		{3, 2, 3, 1},            // off the +x face
		{3, 5, 3, math.Sqrt2},   // off the (+x, +y) edge by (1, 1)
		{3, 5, 7, math.Sqrt(3)}, // off the (+x, +y, +z) corner by (1, 1, 1)
		{1, 2, 6, 0},            // on the +z face
		{1, 3.9, 3, -0.1},       // just inside the +y face
		{-3, 2, 3, 3},           // off the −x face
		{1, -3, -4, 5},          // off the (−y, −z) edge by (3, 4): 5
	}
	for _, tt := range tests {
		got := box(tt.x, tt.y, tt.z, 1, 2, 3, 1, 2, 3)
		if !near(got, tt.want, 1e-12) {
			t.Errorf("box(%g, %g, %g) = %g, want %g", tt.x, tt.y, tt.z, got, tt.want)
		}
	}
}

func TestRoundBoxHandPicked(t *testing.T) {
	// Box of half-sizes (2, 2, 2) rounded with r = 0.5: its corner is an
	// eighth sphere of radius 0.5 centred at (1.5, 1.5, 1.5).
	c := 1.5
	tests := []struct {
		x, y, z, want float64
	}{
		{3, 0, 0, 1},  // off a flat face
		{0, 0, 0, -2}, // centre
		{3, 3, 3, math.Sqrt(3*(3-c)*(3-c)) - 0.5},
		{c + 0.5/math.Sqrt(3), c + 0.5/math.Sqrt(3), c + 0.5/math.Sqrt(3), 0}, // on the corner sphere
		{3, 3, 0, math.Sqrt2*(3-c) - 0.5},                                     // off an edge cylinder
	}
	for _, tt := range tests {
		got := roundBox(tt.x, tt.y, tt.z, 0, 0, 0, 2, 2, 2, 0.5)
		if !near(got, tt.want, 1e-12) {
			t.Errorf("roundBox(%g, %g, %g) = %g, want %g", tt.x, tt.y, tt.z, got, tt.want)
		}
	}
}

func TestCylinderHandPicked(t *testing.T) {
	// Radius 1, w ∈ [0, 2].
	tests := []struct {
		u, v, w, want float64
	}{
		{0, 0, 1, -1},         // centre: side and caps both 1 away
		{0, 0, 1.5, -0.5},     // nearer the top cap
		{0.6, 0.8, 1, 0},      // on the side (radius 1)
		{2, 0, 1, 1},          // off the side
		{0.5, 0, 3, 1},        // above the cap
		{2, 0, 3, math.Sqrt2}, // off the rim by (1, 1)
		{3, 4, -12, math.Sqrt(4*4 + 12*12)},
	}
	for _, tt := range tests {
		got := cylinder(tt.u, tt.v, tt.w, 1, 0, 2)
		if !near(got, tt.want, 1e-12) {
			t.Errorf("cylinder(%g, %g, %g) = %g, want %g", tt.u, tt.v, tt.w, got, tt.want)
		}
	}
}

// The regular hexagon: across corners / across flats = 2/√3 (handbook
// relation: circumradius R = a/cos 30° for apothem a), area (3√3/2)·R².
func TestHexagonHandPicked(t *testing.T) {
	a := 12.0
	R := a * 2 / math.Sqrt(3)
	tests := []struct {
		name       string
		x, y, want float64
	}{
		{"centre", 0, 0, -a},
		{"flat midpoint", 0, a, 0},
		{"corner on +x", R, 0, 0},
		{"corner at 60°", R / 2, a, 0},
		{"off the flat", 0, a + 1, 1},
		{"off the corner along x", R + 1, 0, 1},
		{"off the corner at 120°", -R/2 - 0.5, a + math.Sqrt(3)/2, 1},
		{"inside near the flat", 3, a - 0.25, -0.25},
		// Off the corner at 60° in the direction bisecting its two
		// outward normals (30° and 90°), i.e. along 60°.
		{"off the corner along 60°", R/2 + 0.5*2, a + math.Sqrt(3)/2*2, 2},
	}
	for _, tt := range tests {
		got := hex2(tt.x, tt.y, a)
		if !near(got, tt.want, 1e-12) {
			t.Errorf("hex2 %s (%g, %g) = %g, want %g", tt.name, tt.x, tt.y, got, tt.want)
		}
	}
	// The zero crossings along +x (corner) and +y (flat) are the
	// across-corners and across-flats half-widths: ratio 2/√3.
	cornerHalf := bisectZero(func(s float64) float64 { return hex2(s, 0, a) }, 0, 2*a)
	flatHalf := bisectZero(func(s float64) float64 { return hex2(0, s, a) }, 0, 2*a)
	if got, want := cornerHalf/flatHalf, 2/math.Sqrt(3); !near(got, want, 1e-12) {
		t.Errorf("across corners / across flats = %.15g, want 2/√3 = %.15g", got, want)
	}
	// Shoelace area of the hexagon's vertices against (3√3/2)·R².
	if got, want := hexagonPolygon(a).area(), 3*math.Sqrt(3)/2*R*R; !near(got, want, 1e-9) {
		t.Errorf("hexagon area = %g, want (3√3/2)R² = %g", got, want)
	}
}

// bisectZero finds the sign change of an increasing f on [lo, hi].
func bisectZero(f func(float64) float64, lo, hi float64) float64 {
	for i := 0; i < 200 && hi-lo > 1e-15*math.Max(1, math.Abs(hi)); i++ {
		mid := (lo + hi) / 2
		if f(mid) < 0 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2
}

func hexagonPolygon(a float64) polygon {
	R := a * 2 / math.Sqrt(3)
	pg := make(polygon, 6)
	for k := range pg {
		s, c := math.Sincos(float64(k) * math.Pi / 3)
		pg[k] = vec2{R * c, R * s}
	}
	return pg
}

// Oracle test: the folded closed-form hexagon distance against the
// general polygon distance (nearest of six segments, crossing-number
// sign) at seeded random points, and the rectangle against box2.
func TestHexagonAgainstPolygon(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	a := 1.7
	pg := hexagonPolygon(a)
	sq := polygon{{-1, -0.5}, {1, -0.5}, {1, 0.5}, {-1, 0.5}}
	for i := 0; i < 20000; i++ {
		x, y := rng.Float64()*8-4, rng.Float64()*8-4
		if got, want := hex2(x, y, a), pg.dist(x, y); !near(got, want, 1e-12) {
			t.Fatalf("hex2(%g, %g) = %.15g, polygon distance %.15g", x, y, got, want)
		}
		if got, want := box2(x, y, 1, 0.5), sq.dist(x, y); !near(got, want, 1e-12) {
			t.Fatalf("box2(%g, %g) = %.15g, polygon distance %.15g", x, y, got, want)
		}
	}
}

// Oracle test: the revolved profile of a cylinder equals the cylinder
// primitive everywhere.
func TestRevolveAgainstCylinder(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	pg := polygon{{0, 0}, {1, 0}, {1, 2}, {0, 2}}
	for i := 0; i < 20000; i++ {
		x, y, z := rng.Float64()*6-3, rng.Float64()*6-3, rng.Float64()*6-2
		if got, want := pg.revolve(x, y, z), cylinder(x, y, z, 1, 0, 2); !near(got, want, 1e-12) {
			t.Fatalf("revolve(%g, %g, %g) = %.15g, cylinder %.15g", x, y, z, got, want)
		}
	}
}

// Volumes and areas of revolution against handbook solids.
func TestRevolvedVolumeArea(t *testing.T) {
	R, h := 1.3, 2.1
	tests := []struct {
		name         string
		pg           polygon
		volume, area float64
	}{
		// Cylinder: πR²h, 2πRh + 2πR².
		{"cylinder", polygon{{0, 0}, {R, 0}, {R, h}, {0, h}}, math.Pi * R * R * h, 2*math.Pi*R*h + 2*math.Pi*R*R},
		// Cone: πR²h/3, πR·√(R² + h²) + πR².
		{"cone", polygon{{0, 0}, {R, 0}, {0, h}}, math.Pi * R * R * h / 3, math.Pi*R*math.Hypot(R, h) + math.Pi*R*R},
		// Square torus-like ring, side s centred at radius c (Pappus:
		// V = 2π·c·s², A = 2π·c·4s).
		{"ring", polygon{{2, 0}, {3, 0}, {3, 1}, {2, 1}}, 2 * math.Pi * 2.5 * 1, 2 * math.Pi * 2.5 * 4},
	}
	for _, tt := range tests {
		if got := tt.pg.revolvedVolume(); !near(got, tt.volume, 1e-12) {
			t.Errorf("%s volume = %.15g, want %.15g", tt.name, got, tt.volume)
		}
		if got := tt.pg.revolvedArea(); !near(got, tt.area, 1e-12) {
			t.Errorf("%s area = %.15g, want %.15g", tt.name, got, tt.area)
		}
	}
}

// Steiner's formula reduces to the plain box for r = 0 and to the
// sphere (4/3)πr³, 4πr² when the box is a cube of side 2r (handbook).
func TestRoundBoxVolumeArea(t *testing.T) {
	if got, want := roundBoxVolume(2, 3, 4, 0), 24.0; !near(got, want, 1e-12) {
		t.Errorf("volume r=0: %g, want %g", got, want)
	}
	if got, want := roundBoxArea(2, 3, 4, 0), 2*(6+12+8.0); !near(got, want, 1e-12) {
		t.Errorf("area r=0: %g, want %g", got, want)
	}
	r := 0.7
	if got, want := roundBoxVolume(2*r, 2*r, 2*r, r), 4.0/3*math.Pi*r*r*r; !near(got, want, 1e-12) {
		t.Errorf("volume of sphere: %g, want %g", got, want)
	}
	if got, want := roundBoxArea(2*r, 2*r, 2*r, r), 4*math.Pi*r*r; !near(got, want, 1e-12) {
		t.Errorf("area of sphere: %g, want %g", got, want)
	}
	// Rounded cube of side 2r also equals the sphere's SDF.
	for _, p := range [][3]float64{{1, 2, 3}, {0.1, -0.2, 0.3}, {-2, 0, 0}} {
		if got, want := roundBox(p[0], p[1], p[2], 0, 0, 0, r, r, r, r), math.Sqrt(p[0]*p[0]+p[1]*p[1]+p[2]*p[2])-r; !near(got, want, 1e-12) {
			t.Errorf("rounded cube at %v = %g, sphere distance %g", p, got, want)
		}
	}
}

// An exact SDF has |∇f| = 1 wherever it is differentiable; check the
// primitives by central differences (step 1e-6 on values of order 1:
// truncation ~1e-12 × curvature, rounding ~1e-16/1e-6 = 1e-10; tolerance
// 1e-6 also absorbs the rare sample within a step of a crease).
func TestPrimitivesUnitGradient(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	fs := map[string]func(x, y, z float64) float64{
		"box":       func(x, y, z float64) float64 { return box(x, y, z, 0.1, 0.2, 0.3, 1, 0.5, 0.7) },
		"roundBox":  func(x, y, z float64) float64 { return roundBox(x, y, z, 0, 0, 0, 1, 0.5, 0.7, 0.2) },
		"cylinder":  func(x, y, z float64) float64 { return cylinder(x, y, z, 0.8, -0.5, 0.5) },
		"hexPrism":  func(x, y, z float64) float64 { return hexPrism(x, y, z, 0.9, -0.4, 0.6) },
		"revolve":   func(x, y, z float64) float64 { return hexagonPolygon(0.5).revolve(x, y, z-2) },
		"interval3": func(x, y, z float64) float64 { return interval(z, -1, 1) },
	}
	const h = 1e-6
	for name, f := range fs {
		bad := 0
		for i := 0; i < 5000; i++ {
			x, y, z := rng.Float64()*4-2, rng.Float64()*4-2, rng.Float64()*4-2
			gx := (f(x+h, y, z) - f(x-h, y, z)) / (2 * h)
			gy := (f(x, y+h, z) - f(x, y-h, z)) / (2 * h)
			gz := (f(x, y, z+h) - f(x, y, z-h)) / (2 * h)
			if g := math.Sqrt(gx*gx + gy*gy + gz*gz); math.Abs(g-1) > 1e-6 {
				bad++
			}
		}
		// Inside points on the medial axis (equidistant from two faces)
		// have no gradient; they are a set of measure zero, so at most a
		// handful of 5000 samples may land within a step of one.
		if bad > 5 {
			t.Errorf("%s: |∇f| differs from 1 at %d of 5000 points", name, bad)
		}
	}
}
