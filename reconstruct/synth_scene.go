package reconstruct

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// The synthetic scene is built in a scene frame S: metres, +z up, the
// support's top surface (turntable plate or table top) at z = 0, the
// part standing on it with its footprint centred on the origin. The
// turntable turns about the z axis of S. Sweep outputs are converted to
// the sweep's world frame (frame 0's camera) at the end.

// sceneObject is one mesh of the scene with its fixed pose in S.
type sceneObject struct {
	name     string
	mesh     *mesh.Mesh
	color    mesh.RGB  // albedo when mesh.Colors is nil
	modelToS mesh.Pose // placement in S (for turning objects: at angle 0)
	turns    bool      // turns with the turntable plate
}

// scene is everything drawn in a synthetic sweep and the camera path.
type scene struct {
	objects []sceneObject
	part    int         // index of the part in objects
	partToS mesh.Pose   // the part's placement in S at angle 0
	camToS  []mesh.Pose // per frame
	angles  []float64   // per frame plate angle (turntable), radians, right-handed about +z of S
}

// partOffset returns the placement that stands a mesh on z = 0 with
// the centre of its x-y extent on the origin: the part-frame convention
// of mesh/parts, applied to a loaded mesh.
func partOffset(m *mesh.Mesh) (mesh.Pose, r3.Vec, error) {
	if len(m.Vertices) == 0 || len(m.Faces) == 0 {
		return mesh.Pose{}, r3.Vec{}, fmt.Errorf("reconstruct: part mesh has no faces: %w", mesh.ErrDegenerate)
	}
	lo, hi := m.Vertices[0], m.Vertices[0]
	for _, v := range m.Vertices {
		if !finite(v.X) || !finite(v.Y) || !finite(v.Z) {
			return mesh.Pose{}, r3.Vec{}, fmt.Errorf("reconstruct: part mesh has a non-finite vertex %v", v)
		}
		lo = r3.Vec{X: math.Min(lo.X, v.X), Y: math.Min(lo.Y, v.Y), Z: math.Min(lo.Z, v.Z)}
		hi = r3.Vec{X: math.Max(hi.X, v.X), Y: math.Max(hi.Y, v.Y), Z: math.Max(hi.Z, v.Z)}
	}
	p := mesh.Identity()
	p.T = r3.Vec{X: -(lo.X + hi.X) / 2, Y: -(lo.Y + hi.Y) / 2, Z: -lo.Z}
	return p, r3.Sub(hi, lo), nil
}

// buildScene places the part, its support and the clutter, and plans
// the camera path, all from opt and the scene's random source.
func buildScene(part *mesh.Mesh, opt SynthOptions) (*scene, error) {
	rng := rand.New(rand.NewPCG(opt.Seed, 0x5ce9e))
	place, size, err := partOffset(part)
	if err != nil {
		return nil, err
	}
	if size.X > 0.8*opt.PlateDiameter || size.Y > 0.8*opt.PlateDiameter {
		if opt.Rig == RigTurntable {
			return nil, fmt.Errorf("reconstruct: part is %.0f×%.0f mm, too wide for a %.0f mm turntable plate; is the mesh in millimetres rather than metres?", size.X*1e3, size.Y*1e3, opt.PlateDiameter*1e3)
		}
	}
	if size.X > 1 || size.Y > 1 || size.Z > 1 {
		return nil, fmt.Errorf("reconstruct: part is %.3g×%.3g×%.3g m, larger than 1 m; is the mesh in millimetres rather than metres?", size.X, size.Y, size.Z)
	}
	if math.Max(size.X, math.Max(size.Y, size.Z)) < 0.005 {
		return nil, fmt.Errorf("reconstruct: part is %.3g×%.3g×%.3g m, smaller than 5 mm; is the mesh in metres?", size.X, size.Y, size.Z)
	}
	// A seeded yaw, so the part does not stand square to the camera.
	yaw := mesh.PoseFromAxisAngle(r3.Vec{Z: 1}, rng.Float64()*2*math.Pi, r3.Vec{})
	sc := &scene{partToS: yaw.Mul(place)}
	sc.part = len(sc.objects)
	sc.objects = append(sc.objects, sceneObject{name: "part", mesh: part, color: mesh.RGB{R: 165, G: 165, B: 170},
		modelToS: sc.partToS, turns: opt.Rig == RigTurntable})

	switch opt.Rig {
	case RigTurntable:
		r := opt.PlateDiameter / 2
		th := opt.PlateThickness
		sc.objects = append(sc.objects,
			sceneObject{name: "plate", mesh: plateMesh(r, th, opt.Seed), modelToS: mesh.Identity(), turns: true},
			// The base housing and everything else stand still.
			sceneObject{name: "base", mesh: cylinderMesh(r+0.01, -th-0.045, -th, 96, func(r3.Vec) mesh.RGB { return mesh.RGB{R: 55, G: 57, B: 60} }), modelToS: mesh.Identity()},
		)
		tableZ := -th - 0.045
		sc.objects = append(sc.objects, sceneObject{name: "table", mesh: planeMesh(-0.7, 0.7, -0.6, 1.0, tableZ, 0.02, greyTexture(opt.Seed)), modelToS: mesh.Identity()})
		sc.addClutter(rng, tableZ, false)
		sc.planTurntable(opt)
	case RigHandheld:
		sc.objects = append(sc.objects, sceneObject{name: "table", mesh: planeMesh(-0.9, 0.9, -0.9, 0.9, 0, 0.012, woodTexture(opt.Seed)), modelToS: mesh.Identity()})
		sc.addClutter(rng, 0, true)
		if err := sc.planHandheld(opt, size.Z, rng); err != nil {
			return nil, err
		}
	default:
		return nil, fmt.Errorf("reconstruct: synth rig %q, want %q or %q", opt.Rig, RigTurntable, RigHandheld)
	}
	return sc, nil
}

// addClutter puts a backdrop wall and a few boxes and a can on the
// table, 0.3 m to 1 m from the part. For the turntable (camera on the
// −y side) they stand behind and beside the plate; for a handheld sweep
// (camera circling) they stand beyond the camera's orbit.
func (sc *scene) addClutter(rng *rand.Rand, tableZ float64, around bool) {
	wallY := 1.0
	wallTex := wallTexture(rng.Uint64())
	if around {
		// A room around the table: four walls 1.6 m from the part and a
		// floor 0.75 m below the table top.
		const half, floor, top = 1.6, -0.75, 1.5
		sc.objects = append(sc.objects, sceneObject{name: "room", modelToS: mesh.Identity(), mesh: merge(
			quadMesh(r3.Vec{X: -half, Y: -half, Z: floor}, r3.Vec{X: 2 * half}, r3.Vec{Y: 2 * half}, 0.1, greyTexture(rng.Uint64())),
			quadMesh(r3.Vec{X: -half, Y: half, Z: floor}, r3.Vec{X: 2 * half}, r3.Vec{Z: top - floor}, 0.05, wallTex),
			quadMesh(r3.Vec{X: half, Y: -half, Z: floor}, r3.Vec{X: -2 * half}, r3.Vec{Z: top - floor}, 0.05, wallTex),
			quadMesh(r3.Vec{X: half, Y: half, Z: floor}, r3.Vec{Y: -2 * half}, r3.Vec{Z: top - floor}, 0.05, wallTex),
			quadMesh(r3.Vec{X: -half, Y: -half, Z: floor}, r3.Vec{Y: 2 * half}, r3.Vec{Z: top - floor}, 0.05, wallTex),
		)})
	} else {
		// A backdrop behind the turntable, facing the camera (−y).
		sc.objects = append(sc.objects, sceneObject{name: "wall", modelToS: mesh.Identity(),
			mesh: quadMesh(r3.Vec{X: -1.4, Y: wallY, Z: tableZ - 0.2}, r3.Vec{X: 2.8}, r3.Vec{Z: 1.7}, 0.04, wallTex)})
	}
	n := 5
	for i := 0; i < n; i++ {
		var c r3.Vec
		if around {
			a := 2 * math.Pi * (float64(i) + 0.3 + 0.4*rng.Float64()) / float64(n)
			d := 0.8 + 0.2*rng.Float64()
			c = r3.Vec{X: d * math.Cos(a), Y: d * math.Sin(a)}
		} else {
			// Behind (y > 0.3) or well beside (|x| > 0.3) the plate.
			a := math.Pi * (0.1 + 0.8*float64(i)/float64(n-1) + 0.05*(rng.Float64()-0.5))
			d := 0.35 + 0.5*rng.Float64()
			c = r3.Vec{X: d * math.Cos(a), Y: 0.1 + d*math.Sin(a)}
		}
		sx, sy, sz := 0.06+0.14*rng.Float64(), 0.06+0.14*rng.Float64(), 0.05+0.2*rng.Float64()
		base := boxColors[rng.IntN(len(boxColors))]
		seed := rng.Uint64()
		var m *mesh.Mesh
		if i == n-1 {
			m = cylinderMesh(0.035+0.02*rng.Float64(), tableZ, tableZ+sz, 32, noisyColor(base, 10, seed))
		} else {
			m = boxMesh(r3.Vec{X: -sx / 2, Y: -sy / 2, Z: tableZ}, r3.Vec{X: sx / 2, Y: sy / 2, Z: tableZ + sz}, 0.02, noisyColor(base, 12, seed))
		}
		pose := mesh.PoseFromAxisAngle(r3.Vec{Z: 1}, rng.Float64()*math.Pi, c)
		sc.objects = append(sc.objects, sceneObject{name: fmt.Sprintf("clutter%d", i), mesh: m, modelToS: pose})
	}
}

var boxColors = []mesh.RGB{
	{R: 176, G: 136, B: 88},  // cardboard
	{R: 60, G: 90, B: 150},   // blue crate
	{R: 200, G: 190, B: 60},  // yellow bin
	{R: 90, G: 140, B: 80},   // green box
	{R: 150, G: 60, B: 55},   // red box
	{R: 120, G: 120, B: 125}, // grey case
}

// planTurntable fixes the camera at opt.Distance from the plate centre,
// looking down at opt.Elevation, on the −y side of S; the plate turns
// by 360°/Frames per frame, counter-clockwise seen from above.
func (sc *scene) planTurntable(opt SynthOptions) {
	el := opt.Elevation
	eye := r3.Vec{Y: -opt.Distance * math.Cos(el), Z: opt.Distance * math.Sin(el)}
	camToS, _ := mesh.LookAt(eye, r3.Vec{}, r3.Vec{Z: 1}) // el in (0, π/2): never degenerate
	sc.camToS = make([]mesh.Pose, opt.Frames)
	sc.angles = make([]float64, opt.Frames)
	for i := range sc.camToS {
		sc.camToS[i] = camToS
		sc.angles[i] = 2 * math.Pi * float64(i) / float64(opt.Frames)
	}
}

// planHandheld plans a camera orbit around the part: one turn at
// uneven speed, radius swinging ±20 % about opt.Distance, height
// swinging ±12° about opt.Elevation, and a person's wobble, smooth
// low-frequency noise of about 1 cm on the position and 2° on the
// orientation.
func (sc *scene) planHandheld(opt SynthOptions, height float64, rng *rand.Rand) error {
	phi0 := -math.Pi/2 + 0.3*(rng.Float64()-0.5)
	speed := smoothNoise(rng, 2)
	radius := smoothNoise(rng, 2)
	elev := smoothNoise(rng, 2)
	var wob [6]func(float64) float64
	for i := range wob {
		wob[i] = smoothNoise(rng, 4)
	}
	target := r3.Vec{Z: height / 2}
	sc.camToS = make([]mesh.Pose, opt.Frames)
	for i := range sc.camToS {
		t := float64(i) / float64(opt.Frames)
		// φ'(t) = 2π(1 + 0.3·s(t)) with |s| ≤ 1 stays positive: the
		// camera never turns back, but slows and hurries.
		phi := phi0 + 2*math.Pi*t + 0.3*integrate(speed, t)
		r := opt.Distance * (1 + 0.2*radius(t))
		el := opt.Elevation + 12*math.Pi/180*elev(t)
		eye := r3.Add(target, r3.Vec{X: r * math.Cos(el) * math.Cos(phi), Y: r * math.Cos(el) * math.Sin(phi), Z: r * math.Sin(el)})
		eye = r3.Add(eye, r3.Scale(0.01, r3.Vec{X: wob[0](t), Y: wob[1](t), Z: wob[2](t)}))
		look, err := mesh.LookAt(eye, target, r3.Vec{Z: 1})
		if err != nil {
			return fmt.Errorf("reconstruct: handheld camera path: %w", err)
		}
		turn := mesh.RotationFromAxisAngle(r3.Vec{X: wob[3](t), Y: wob[4](t), Z: wob[5](t)}, 2*math.Pi/180)
		look.R = look.R.Mul(turn)
		sc.camToS[i] = look
	}
	return nil
}

// smoothNoise returns a smooth random function of t ∈ [0, 1] with
// values in [−1, 1]: a sum of a few sinusoids of 1..maxCycles cycles
// with random phases and weights (a person's slow sway, not white
// noise).
func smoothNoise(rng *rand.Rand, maxCycles int) func(float64) float64 {
	type wave struct{ f, ph, a float64 }
	var ws []wave
	sum := 0.0
	for k := 1; k <= maxCycles; k++ {
		a := 0.3 + rng.Float64()
		ws = append(ws, wave{float64(k) + 0.5*rng.Float64(), 2 * math.Pi * rng.Float64(), a})
		sum += a
	}
	return func(t float64) float64 {
		v := 0.0
		for _, w := range ws {
			v += w.a * math.Sin(2*math.Pi*w.f*t+w.ph)
		}
		return v / sum
	}
}

// integrate returns 2π·∫₀ᵗ f by the midpoint rule on 64 steps per unit
// of t: accurate enough for a camera path, and smooth in t.
func integrate(f func(float64) float64, t float64) float64 {
	n := int(math.Ceil(64*t)) + 1
	h := t / float64(n)
	s := 0.0
	for i := 0; i < n; i++ {
		s += f((float64(i) + 0.5) * h)
	}
	return 2 * math.Pi * s * h
}

// ---- meshes ----------------------------------------------------------

// quadMesh is a flat rectangle o + s·u + t·v (s, t in [0, 1]) as a
// grid of cells of about cell metres, facing u × v, coloured by col at
// the vertices.
func quadMesh(o, u, v r3.Vec, cell float64, col func(r3.Vec) mesh.RGB) *mesh.Mesh {
	nu := max(1, int(math.Ceil(r3.Norm(u)/cell)))
	nv := max(1, int(math.Ceil(r3.Norm(v)/cell)))
	m := &mesh.Mesh{}
	for j := 0; j <= nv; j++ {
		for i := 0; i <= nu; i++ {
			p := r3.Add(o, r3.Add(r3.Scale(float64(i)/float64(nu), u), r3.Scale(float64(j)/float64(nv), v)))
			m.Vertices = append(m.Vertices, p)
			m.Colors = append(m.Colors, col(p))
		}
	}
	gridFaces(m, 0, nu, nv, false)
	return m
}

// planeMesh is a horizontal rectangle at height z, facing +z.
func planeMesh(x0, x1, y0, y1, z, cell float64, col func(r3.Vec) mesh.RGB) *mesh.Mesh {
	return quadMesh(r3.Vec{X: x0, Y: y0, Z: z}, r3.Vec{X: x1 - x0}, r3.Vec{Y: y1 - y0}, cell, col)
}

// gridFaces triangulates a (nx+1)×(ny+1) vertex grid starting at base,
// counter-clockwise in (i, j) unless flip.
func gridFaces(m *mesh.Mesh, base, nx, ny int, flip bool) {
	at := func(i, j int) uint32 { return uint32(base + j*(nx+1) + i) }
	for j := 0; j < ny; j++ {
		for i := 0; i < nx; i++ {
			a, b, c, d := at(i, j), at(i+1, j), at(i+1, j+1), at(i, j+1)
			if flip {
				m.Faces = append(m.Faces, mesh.Face{a, c, b}, mesh.Face{a, d, c})
			} else {
				m.Faces = append(m.Faces, mesh.Face{a, b, c}, mesh.Face{a, c, d})
			}
		}
	}
}

// plateMesh is the turntable plate: a disc of radius r, top face at
// z = 0, th thick, dark rubber with concentric grooves, a tick every
// 10° near the rim and a white start mark at angle 0, so that its
// texture shows the turn.
func plateMesh(r, th float64, seed uint64) *mesh.Mesh {
	const segs = 360
	rings := int(math.Ceil(r / 0.004))
	m := &mesh.Mesh{}
	top := func(p r3.Vec) mesh.RGB {
		rr := math.Hypot(p.X, p.Y)
		a := math.Atan2(p.Y, p.X) * 180 / math.Pi
		if a < 0 {
			a += 360
		}
		v := 40 + 6*valueNoise(p.X, p.Y, 0.01, seed)
		switch {
		case rr > 0.70*r && (a < 1.5 || a > 358.5):
			v = 225 // start mark
		case rr > 0.88*r && math.Abs(a-10*math.Round(a/10)) < 0.6:
			v = 150 // ticks
		case math.Abs(rr-0.3*r) < 0.002 || math.Abs(rr-0.6*r) < 0.002:
			v = 70 // grooves
		}
		return mesh.RGB{R: clamp8(v), G: clamp8(v), B: clamp8(v + 3)}
	}
	// Top: centre vertex, then rings.
	m.Vertices = append(m.Vertices, r3.Vec{})
	m.Colors = append(m.Colors, top(r3.Vec{}))
	for k := 1; k <= rings; k++ {
		rr := r * float64(k) / float64(rings)
		for s := 0; s < segs; s++ {
			a := 2 * math.Pi * float64(s) / segs
			p := r3.Vec{X: rr * math.Cos(a), Y: rr * math.Sin(a)}
			m.Vertices = append(m.Vertices, p)
			m.Colors = append(m.Colors, top(p))
		}
	}
	ring := func(k, s int) uint32 { return uint32(1 + (k-1)*segs + (s % segs)) }
	for s := 0; s < segs; s++ {
		m.Faces = append(m.Faces, mesh.Face{0, ring(1, s), ring(1, s+1)})
	}
	for k := 1; k < rings; k++ {
		for s := 0; s < segs; s++ {
			a, b, c, d := ring(k, s), ring(k+1, s), ring(k+1, s+1), ring(k, s+1)
			m.Faces = append(m.Faces, mesh.Face{a, b, c}, mesh.Face{a, c, d})
		}
	}
	// Rim: a band from z = 0 down to −th, dark.
	side := mesh.RGB{R: 30, G: 30, B: 33}
	b0 := len(m.Vertices)
	for s := 0; s < segs; s++ {
		a := 2 * math.Pi * float64(s) / segs
		for _, z := range []float64{0, -th} {
			m.Vertices = append(m.Vertices, r3.Vec{X: r * math.Cos(a), Y: r * math.Sin(a), Z: z})
			m.Colors = append(m.Colors, side)
		}
	}
	for s := 0; s < segs; s++ {
		u0, l0 := uint32(b0+2*s), uint32(b0+2*s+1)
		u1, l1 := uint32(b0+2*((s+1)%segs)), uint32(b0+2*((s+1)%segs)+1)
		m.Faces = append(m.Faces, mesh.Face{l0, l1, u1}, mesh.Face{l0, u1, u0})
	}
	return m
}

// cylinderMesh is a closed vertical cylinder of radius r from z0 to z1.
func cylinderMesh(r, z0, z1 float64, segs int, col func(r3.Vec) mesh.RGB) *mesh.Mesh {
	m := &mesh.Mesh{}
	add := func(p r3.Vec) uint32 {
		m.Vertices = append(m.Vertices, p)
		m.Colors = append(m.Colors, col(p))
		return uint32(len(m.Vertices) - 1)
	}
	ct, cb := add(r3.Vec{Z: z1}), add(r3.Vec{Z: z0})
	base := len(m.Vertices)
	for s := 0; s < segs; s++ {
		a := 2 * math.Pi * float64(s) / float64(segs)
		add(r3.Vec{X: r * math.Cos(a), Y: r * math.Sin(a), Z: z1})
		add(r3.Vec{X: r * math.Cos(a), Y: r * math.Sin(a), Z: z0})
	}
	for s := 0; s < segs; s++ {
		u0, l0 := uint32(base+2*s), uint32(base+2*s+1)
		u1, l1 := uint32(base+2*((s+1)%segs)), uint32(base+2*((s+1)%segs)+1)
		m.Faces = append(m.Faces, mesh.Face{ct, u0, u1}, mesh.Face{cb, l1, l0}, mesh.Face{l0, l1, u1}, mesh.Face{l0, u1, u0})
	}
	return m
}

// boxMesh is a closed axis-aligned box from lo to hi with each face
// subdivided into cells of about cell metres (so vertex colours can
// carry texture).
func boxMesh(lo, hi r3.Vec, cell float64, col func(r3.Vec) mesh.RGB) *mesh.Mesh {
	d := r3.Sub(hi, lo)
	x, y, z := r3.Vec{X: d.X}, r3.Vec{Y: d.Y}, r3.Vec{Z: d.Z}
	// Each face: an origin corner and two edges whose cross product
	// points outwards.
	return merge(
		quadMesh(lo, y, x, cell, col),            // bottom, −z
		quadMesh(r3.Add(lo, z), x, y, cell, col), // top, +z
		quadMesh(lo, x, z, cell, col),            // −y
		quadMesh(r3.Add(lo, y), z, x, cell, col), // +y
		quadMesh(lo, z, y, cell, col),            // −x
		quadMesh(r3.Add(lo, x), y, z, cell, col), // +x
	)
}

// merge concatenates meshes that all carry colours.
func merge(ms ...*mesh.Mesh) *mesh.Mesh {
	out := &mesh.Mesh{}
	for _, m := range ms {
		base := uint32(len(out.Vertices))
		out.Vertices = append(out.Vertices, m.Vertices...)
		out.Colors = append(out.Colors, m.Colors...)
		for _, f := range m.Faces {
			out.Faces = append(out.Faces, mesh.Face{f[0] + base, f[1] + base, f[2] + base})
		}
	}
	return out
}

// ---- textures --------------------------------------------------------

func noisyColor(c mesh.RGB, amp float64, seed uint64) func(r3.Vec) mesh.RGB {
	return func(p r3.Vec) mesh.RGB {
		n := amp * valueNoise3(p, 0.03, seed)
		return mesh.RGB{R: clamp8(float64(c.R) + n), G: clamp8(float64(c.G) + n), B: clamp8(float64(c.B) + n)}
	}
}

// woodTexture: planks 12 cm wide along x with grain, each plank a
// slightly different tone.
func woodTexture(seed uint64) func(r3.Vec) mesh.RGB {
	return func(p r3.Vec) mesh.RGB {
		plank := math.Floor(p.Y / 0.12)
		tone := 0.9 + 0.2*hashUnit(int64(plank), 7, seed)
		// Grain: stripes along x about 4 cm apart, wandering slowly.
		g := p.Y*25 + 1.2*valueNoise(p.X, p.Y*3, 0.2, seed) + plank*0.37
		k := tone * (0.88 + 0.12*math.Sin(2*math.Pi*g))
		if math.Abs(p.Y-0.12*math.Round(p.Y/0.12)) < 0.002 {
			k *= 0.6 // the seam between planks
		}
		return mesh.RGB{R: clamp8(158 * k), G: clamp8(112 * k), B: clamp8(70 * k)}
	}
}

// greyTexture: a grey laminate with faint mottling.
func greyTexture(seed uint64) func(r3.Vec) mesh.RGB {
	return func(p r3.Vec) mesh.RGB {
		v := 140 + 12*valueNoise(p.X, p.Y, 0.04, seed) + 5*valueNoise(p.X, p.Y, 0.01, seed+1)
		return mesh.RGB{R: clamp8(v), G: clamp8(v), B: clamp8(v - 4)}
	}
}

// wallTexture: off-white with a slow shading gradient and a poster.
func wallTexture(seed uint64) func(r3.Vec) mesh.RGB {
	return func(p r3.Vec) mesh.RGB {
		if p.X > -0.5 && p.X < 0.1 && p.Z > 0.08 && p.Z < 0.5 {
			// A poster of coloured bands.
			band := int(math.Floor((p.Z - 0.08) / 0.07))
			c := boxColors[(band+int(seed%6))%len(boxColors)]
			return c
		}
		// A pale blue-grey backdrop, unlike the table.
		v := 10 * valueNoise(p.X, p.Z, 0.3, seed)
		return mesh.RGB{R: clamp8(170 + v), G: clamp8(188 + v), B: clamp8(205 + v)}
	}
}

// valueNoise is 2-D value noise in [−1, 1] with lattice spacing cell:
// hashed lattice values, smoothstep-interpolated.
func valueNoise(x, y, cell float64, seed uint64) float64 {
	x, y = x/cell, y/cell
	ix, iy := math.Floor(x), math.Floor(y)
	fx, fy := smoothstep(x-ix), smoothstep(y-iy)
	i, j := int64(ix), int64(iy)
	v00, v10 := hashUnit(i, j, seed), hashUnit(i+1, j, seed)
	v01, v11 := hashUnit(i, j+1, seed), hashUnit(i+1, j+1, seed)
	a := v00 + (v10-v00)*fx
	b := v01 + (v11-v01)*fx
	return 2*(a+(b-a)*fy) - 1
}

func valueNoise3(p r3.Vec, cell float64, seed uint64) float64 {
	return (valueNoise(p.X, p.Y, cell, seed) + valueNoise(p.Y, p.Z, cell, seed+1) + valueNoise(p.Z, p.X, cell, seed+2)) / 3
}

func smoothstep(t float64) float64 { return t * t * (3 - 2*t) }

// hashUnit maps a lattice point to [0, 1) with a SplitMix64 finaliser
// (Steele, Lea & Flood 2014, OOPSLA, DOI 10.1145/2660193.2660195).
func hashUnit(i, j int64, seed uint64) float64 {
	z := uint64(i)*0x9e3779b97f4a7c15 ^ uint64(j)*0xc2b2ae3d27d4eb4f ^ seed*0x165667b19e3779f9
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	z ^= z >> 31
	return float64(z>>11) / (1 << 53)
}

func clamp8(v float64) uint8 {
	switch {
	case !(v > 0):
		return 0
	case v >= 255:
		return 255
	}
	return uint8(v + 0.5)
}
