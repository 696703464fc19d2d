package validate

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// Object indices in a Scene's frame (render.Frame.Object): the part is
// 0, the table 1, clutter from 2 in the order of Scene.Clutter, then the
// occluders.
const (
	ScenePart  = 0
	SceneTable = 1
)

// SceneOptions sets up synthetic check scenes.
type SceneOptions struct {
	// Intrinsics is the camera.
	// DEFAULT: mesh.DefaultIntrinsics() (640×480, f = 525 px)
	Intrinsics mesh.Intrinsics
	// MinElevation and MaxElevation bound the camera's elevation above
	// the table plane, seen from the part (radians).
	// DEFAULT: 20° and 80°
	MinElevation, MaxElevation float64
	// MinDistance and MaxDistance bound the camera's distance from the
	// point it looks at (metres).
	// DEFAULT: 0.35 and 0.8
	MinDistance, MaxDistance float64
	// LookOffset: the camera looks at a point drawn uniformly within
	// this distance of the part's centre of mass, so the part is not
	// always in the middle of the image (metres).
	// DEFAULT: 0.03
	LookOffset float64
	// MinClutter and MaxClutter bound the number of clutter objects
	// placed around the part (drawn uniformly from the clutter meshes).
	// DEFAULT: 0 and 4
	MinClutter, MaxClutter int
	// ClutterRing is how far beyond the part's bounding circle clutter
	// may stand (metres), and ClutterGap the smallest gap between
	// bounding circles.
	// DEFAULT: 0.12 and 0.005
	ClutterRing, ClutterGap float64
	// MinOcclusion and MaxOcclusion bound the target share of the part's
	// visible pixels that an occluder hides, drawn uniformly per scene.
	// DEFAULT: 0 and 0.5
	MinOcclusion, MaxOcclusion float64
	// TableSize is the side of the square table (metres) and TableCell
	// the side of its texture cells.
	// DEFAULT: 1.2 and 0.02
	TableSize, TableCell float64
	// MinVisiblePixels: a viewpoint from which fewer of the part's
	// pixels are seen (before occluders) is drawn again.
	// DEFAULT: 200
	MinVisiblePixels int
	// Noise is the sensor model; its GainSigma, WhiteBalanceSigma and
	// LightJitter vary the light per scene (render.PerturbLighting).
	// DEFAULT: render.DefaultNoiseOptions() with MinRange 0.25 m, so the
	// nearest viewpoints (0.35 m) keep their depth (a short-range
	// structured-light sensor)
	Noise render.NoiseOptions
	// Render sets the shading.
	// DEFAULT: render.DefaultOptions()
	Render render.Options
	// Seed seeds the scenes: scene i draws from PCG(Seed, i), so each
	// scene is reproducible on its own.
	// DEFAULT: 1
	Seed uint64
}

// DefaultSceneOptions returns the documented defaults.
func DefaultSceneOptions() SceneOptions {
	noise := render.DefaultNoiseOptions()
	noise.MinRange = 0.25
	return SceneOptions{
		Intrinsics:       mesh.DefaultIntrinsics(),
		MinElevation:     20 * math.Pi / 180,
		MaxElevation:     80 * math.Pi / 180,
		MinDistance:      0.35,
		MaxDistance:      0.8,
		LookOffset:       0.03,
		MinClutter:       0,
		MaxClutter:       4,
		ClutterRing:      0.12,
		ClutterGap:       0.005,
		MinOcclusion:     0,
		MaxOcclusion:     0.5,
		TableSize:        1.2,
		TableCell:        0.02,
		MinVisiblePixels: 200,
		Noise:            noise,
		Render:           render.DefaultOptions(),
		Seed:             1,
	}
}

// Validate reports options that cannot make scenes.
func (o SceneOptions) Validate() error {
	if err := o.Intrinsics.Validate(); err != nil {
		return fmt.Errorf("validate: scene %w", err)
	}
	if !(o.MinElevation > 0 && o.MinElevation <= o.MaxElevation && o.MaxElevation < math.Pi/2) {
		return fmt.Errorf("validate: scene elevations %v..%v rad, want 0 < min ≤ max < π/2", o.MinElevation, o.MaxElevation)
	}
	if !(o.MinDistance > 0 && o.MinDistance <= o.MaxDistance) || math.IsInf(o.MaxDistance, 0) {
		return fmt.Errorf("validate: scene distances %v..%v m, want 0 < min ≤ max", o.MinDistance, o.MaxDistance)
	}
	if !(o.LookOffset >= 0) || !(o.ClutterRing >= 0) || !(o.ClutterGap >= 0) {
		return errors.New("validate: scene LookOffset, ClutterRing and ClutterGap must be ≥ 0")
	}
	if o.MinClutter < 0 || o.MaxClutter < o.MinClutter || o.MaxClutter > 64 {
		return fmt.Errorf("validate: scene clutter count %d..%d, want 0 ≤ min ≤ max ≤ 64", o.MinClutter, o.MaxClutter)
	}
	if !(o.MinOcclusion >= 0 && o.MinOcclusion <= o.MaxOcclusion && o.MaxOcclusion < 1) {
		return fmt.Errorf("validate: scene occlusion %v..%v, want 0 ≤ min ≤ max < 1", o.MinOcclusion, o.MaxOcclusion)
	}
	if !(o.TableCell > 0) || !(o.TableSize >= o.TableCell) || o.TableSize/o.TableCell > 1000 {
		return fmt.Errorf("validate: scene table %v m in cells of %v m, want at most 1000 cells a side", o.TableSize, o.TableCell)
	}
	if err := o.Noise.Validate(); err != nil {
		return err
	}
	return o.Render.Validate()
}

// Scene is one synthetic check scene.
type Scene struct {
	// Index is the scene's number (its random stream).
	Index int
	// Frame is the rendered frame with sensor noise. Object and Normal
	// are the clean render's ground truth (see render.Sensor.Apply).
	Frame *render.Frame
	// ModelToCam is the part's true pose.
	ModelToCam mesh.Pose
	// ModelToWorld places the part on the table (world: z up, table top
	// z = 0); CamToWorld is the camera.
	ModelToWorld, CamToWorld mesh.Pose
	// StablePose is the index of the resting pose used.
	StablePose int
	// TargetOcclusion is the share of the part's pixels the occluder was
	// sized to hide; VisibleFraction the share of the part's pixels
	// without occluders (UnoccludedPixels) still seen with them
	// (VisiblePixels), measured on the clean renders.
	TargetOcclusion, VisibleFraction float64
	VisiblePixels, UnoccludedPixels  int
	// Clutter lists the clutter meshes placed, by index into the list
	// given to NewSceneGenerator; Occluders counts the occluders.
	Clutter   []int
	Occluders int
}

// SceneGenerator renders reproducible synthetic scenes of one part. It
// keeps a renderer and scratch buffers: it is not safe for concurrent
// use (make one per goroutine).
type SceneGenerator struct {
	part       *mesh.Mesh
	poses      []StablePose
	partRadius []float64 // bounding-circle radius per pose
	clutter    []*mesh.Mesh
	clutterPos []StablePose
	clutterRad []float64
	table      *mesh.Mesh
	renderer   *render.Renderer
	sensor     *render.Sensor
	opt        SceneOptions
	clean      render.Frame
}

// NewSceneGenerator prepares scenes of part resting in one of poses
// (from StablePoses, chosen with their probabilities), with clutter
// drawn from the clutter meshes (each resting in its most probable
// pose). part must have at least one face; clutter may be empty.
func NewSceneGenerator(part *mesh.Mesh, poses []StablePose, clutter []*mesh.Mesh, opt SceneOptions) (*SceneGenerator, error) {
	if err := opt.Validate(); err != nil {
		return nil, err
	}
	if err := part.Validate(); err != nil || len(part.Faces) == 0 {
		return nil, fmt.Errorf("validate: scene part mesh: %v (%d faces)", err, len(part.Faces))
	}
	if len(poses) == 0 {
		return nil, errors.New("validate: scene needs at least one stable pose of the part")
	}
	g := &SceneGenerator{part: part, poses: poses, opt: opt}
	for _, p := range poses {
		g.partRadius = append(g.partRadius, planeRadius(part, p.ModelToSupport))
	}
	for i, c := range clutter {
		res, err := StablePoses(c, DefaultStableOptions())
		if err != nil {
			return nil, fmt.Errorf("validate: clutter mesh %d: %w", i, err)
		}
		g.clutter = append(g.clutter, c)
		g.clutterPos = append(g.clutterPos, res.Poses[0])
		g.clutterRad = append(g.clutterRad, planeRadius(c, res.Poses[0].ModelToSupport))
	}
	g.table = tableMesh(opt.TableSize, opt.TableCell, opt.Seed)
	var err error
	if g.renderer, err = render.NewRenderer(opt.Intrinsics); err != nil {
		return nil, err
	}
	if g.sensor, err = render.NewSensor(opt.Noise); err != nil {
		return nil, err
	}
	return g, nil
}

// planeRadius returns the largest horizontal distance from the support
// frame's vertical axis of the mesh's vertices moved by p.
func planeRadius(m *mesh.Mesh, p mesh.Pose) float64 {
	var r float64
	for _, v := range m.Vertices {
		q := p.Apply(v)
		r = math.Max(r, math.Hypot(q.X, q.Y))
	}
	return r
}

// tableMesh returns a square table top at z = 0 facing +z, in cells of
// side cell, each cell its own quad with a colour of its own (a
// wood-like base with random brightness and a slight hue shift), so the
// texture has sharp cell edges.
func tableMesh(size, cell float64, seed uint64) *mesh.Mesh {
	n := int(math.Round(size / cell))
	rng := rand.New(rand.NewPCG(seed, 0x7ab1e))
	m := &mesh.Mesh{}
	h := float64(n) * cell / 2
	for j := 0; j < n; j++ {
		for i := 0; i < n; i++ {
			x0, y0 := -h+float64(i)*cell, -h+float64(j)*cell
			b := uint32(len(m.Vertices))
			m.Vertices = append(m.Vertices,
				r3.Vec{X: x0, Y: y0}, r3.Vec{X: x0 + cell, Y: y0},
				r3.Vec{X: x0 + cell, Y: y0 + cell}, r3.Vec{X: x0, Y: y0 + cell})
			k := 0.8 + 0.35*rng.Float64()
			c := mesh.RGB{R: clampByte(175 * k), G: clampByte((140 + 10*rng.NormFloat64()) * k), B: clampByte(100 * k)}
			m.Colors = append(m.Colors, c, c, c, c)
			m.Faces = append(m.Faces, mesh.Face{b, b + 1, b + 2}, mesh.Face{b, b + 2, b + 3})
		}
	}
	return m
}

func clampByte(v float64) uint8 { return uint8(math.Max(0, math.Min(255, math.Round(v)))) }

// yawPose returns a rotation by yaw about z followed by a translation.
func yawPose(yaw float64, t r3.Vec) mesh.Pose {
	return mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{Z: 1}, yaw), T: t}
}

// maxViewTries bounds the viewpoints drawn for one scene.
const maxViewTries = 20

// Scene renders scene number i. The same options, meshes and i always
// give the same scene.
func (g *SceneGenerator) Scene(i int) (*Scene, error) {
	opt := g.opt
	rng := rand.New(rand.NewPCG(opt.Seed, uint64(i)))
	sc := &Scene{Index: i}

	// The part in a stable pose drawn by probability, turned about z.
	u := rng.Float64()
	sc.StablePose = len(g.poses) - 1
	var acc float64
	for k, p := range g.poses {
		acc += p.Probability
		if u < acc {
			sc.StablePose = k
			break
		}
	}
	sp := g.poses[sc.StablePose]
	sc.ModelToWorld = yawPose(2*math.Pi*rng.Float64(), r3.Vec{}).Mul(sp.ModelToSupport)
	centre := r3.Vec{Z: sp.Height} // the centre of mass, above the origin

	// Clutter around it, on bounding circles that do not overlap.
	type circle struct {
		c r3.Vec
		r float64
	}
	circles := []circle{{r3.Vec{}, g.partRadius[sc.StablePose]}}
	var clutterPoses []mesh.Pose
	if len(g.clutter) > 0 {
		n := opt.MinClutter + rng.IntN(opt.MaxClutter-opt.MinClutter+1)
		for k := 0; k < n; k++ {
			ci := rng.IntN(len(g.clutter))
			r := g.clutterRad[ci]
			for try := 0; try < 20; try++ {
				d := circles[0].r + r + opt.ClutterGap + rng.Float64()*opt.ClutterRing
				a := 2 * math.Pi * rng.Float64()
				c := r3.Vec{X: d * math.Cos(a), Y: d * math.Sin(a)}
				ok := true
				for _, o := range circles {
					if math.Hypot(c.X-o.c.X, c.Y-o.c.Y) < r+o.r+opt.ClutterGap {
						ok = false
						break
					}
				}
				if ok {
					circles = append(circles, circle{c, r})
					sc.Clutter = append(sc.Clutter, ci)
					clutterPoses = append(clutterPoses, yawPose(2*math.Pi*rng.Float64(), c).Mul(g.clutterPos[ci].ModelToSupport))
					break
				}
			}
		}
	}
	ropt := render.PerturbLighting(opt.Render, opt.Noise, rng)
	sc.TargetOcclusion = opt.MinOcclusion + rng.Float64()*(opt.MaxOcclusion-opt.MinOcclusion)

	// A viewpoint over the upper view sphere from which the part is seen.
	var objs []render.Object
	for try := 0; ; try++ {
		if try == maxViewTries {
			return nil, fmt.Errorf("validate: scene %d: the part shows fewer than %d pixels from %d viewpoints", i, opt.MinVisiblePixels, maxViewTries)
		}
		el := opt.MinElevation + rng.Float64()*(opt.MaxElevation-opt.MinElevation)
		az := 2 * math.Pi * rng.Float64()
		dist := opt.MinDistance + rng.Float64()*(opt.MaxDistance-opt.MinDistance)
		target := r3.Add(centre, r3.Scale(opt.LookOffset*math.Cbrt(rng.Float64()), randomUnit(rng)))
		eye := r3.Add(target, r3.Scale(dist, r3.Vec{X: math.Cos(el) * math.Cos(az), Y: math.Cos(el) * math.Sin(az), Z: math.Sin(el)}))
		camToWorld, err := mesh.LookAt(eye, target, r3.Vec{Z: 1})
		if err != nil {
			continue
		}
		sc.CamToWorld = camToWorld
		worldToCam := camToWorld.Inv()
		sc.ModelToCam = worldToCam.Mul(sc.ModelToWorld)
		objs = objs[:0]
		objs = append(objs,
			render.Object{Mesh: g.part, ModelToCam: sc.ModelToCam, Color: mesh.RGB{R: 128, G: 128, B: 128}},
			render.Object{Mesh: g.table, ModelToCam: worldToCam})
		for k, ci := range sc.Clutter {
			objs = append(objs, render.Object{Mesh: g.clutter[ci], ModelToCam: worldToCam.Mul(clutterPoses[k]), Color: mesh.RGB{R: 90, G: 110, B: 140}})
		}
		if err := g.renderer.RenderInto(&g.clean, objs, ropt); err != nil {
			return nil, fmt.Errorf("validate: scene %d: %w", i, err)
		}
		sc.UnoccludedPixels = countObject(g.clean.Object, ScenePart)
		if sc.UnoccludedPixels >= opt.MinVisiblePixels {
			break
		}
	}

	// An occluder: a thin plate facing the camera between it and the
	// part, slid across the part's image until it hides the target share
	// of the part's pixels (found by bisection on the plate's projected
	// rectangle), then rendered.
	sc.VisiblePixels = sc.UnoccludedPixels
	if sc.TargetOcclusion > 0.005 {
		plate, pose := g.occluder(rng, sc)
		objs = append(objs, render.Object{Mesh: plate, ModelToCam: pose, Color: mesh.RGB{
			R: uint8(40 + rng.IntN(180)), G: uint8(40 + rng.IntN(180)), B: uint8(40 + rng.IntN(180))}})
		sc.Occluders = 1
		if err := g.renderer.RenderInto(&g.clean, objs, ropt); err != nil {
			return nil, fmt.Errorf("validate: scene %d: %w", i, err)
		}
		sc.VisiblePixels = countObject(g.clean.Object, ScenePart)
	}
	sc.VisibleFraction = float64(sc.VisiblePixels) / float64(sc.UnoccludedPixels)
	sc.Frame = &render.Frame{}
	if err := g.sensor.Apply(sc.Frame, &g.clean, rng); err != nil {
		return nil, fmt.Errorf("validate: scene %d: %w", i, err)
	}
	return sc, nil
}

func countObject(obj []int32, id int32) int {
	n := 0
	for _, o := range obj {
		if o == id {
			n++
		}
	}
	return n
}

// occluder returns a thin plate (camera frame) that hides about the
// target share of the part's pixels in g.clean.
func (g *SceneGenerator) occluder(rng *rand.Rand, sc *Scene) (*mesh.Mesh, mesh.Pose) {
	intr := g.opt.Intrinsics
	w := intr.Width
	// The part's pixels and their bounding box and mean depth.
	var px [][2]int
	minU, minV, maxU, maxV := w, intr.Height, -1, -1
	var zsum float64
	for k, o := range g.clean.Object {
		if o != ScenePart {
			continue
		}
		x, y := k%w, k/w
		px = append(px, [2]int{x, y})
		minU, maxU = min(minU, x), max(maxU, x)
		minV, maxV = min(minV, y), max(maxV, y)
		zsum += float64(g.clean.Depth[k])
	}
	zPart := zsum / float64(len(px))
	// The plate stands at 45–70 % of the way to the part, large enough
	// to cover the part's whole image, and slides along a random image
	// direction from covering it fully (offset 0) to missing it.
	zPlate := zPart * (0.45 + 0.25*rng.Float64())
	spanU, spanV := float64(maxU-minU+1), float64(maxV-minV+1)
	halfU := 0.6 * math.Max(spanU, spanV)
	halfV := halfU
	cu, cv := float64(minU+maxU)/2, float64(minV+maxV)/2
	ang := 2 * math.Pi * rng.Float64()
	du, dv := math.Cos(ang), math.Sin(ang)
	hidden := func(s float64) float64 {
		u0, u1 := cu+s*du-halfU, cu+s*du+halfU
		v0, v1 := cv+s*dv-halfV, cv+s*dv+halfV
		n := 0
		for _, p := range px {
			if float64(p[0]) >= u0 && float64(p[0]) <= u1 && float64(p[1]) >= v0 && float64(p[1]) <= v1 {
				n++
			}
		}
		return float64(n) / float64(len(px))
	}
	lo, hi := 0.0, 2*(halfU+math.Max(spanU, spanV))
	for it := 0; it < 40; it++ {
		mid := (lo + hi) / 2
		if hidden(mid) > sc.TargetOcclusion {
			lo = mid
		} else {
			hi = mid
		}
	}
	s := (lo + hi) / 2
	// Back to metres at the plate's depth: pixel (u, v) at depth z is
	// ((u − cx)·z/fx, (v − cy)·z/fy, z).
	centre := intr.BackProject(cu+s*du, cv+s*dv, zPlate)
	hx, hy := halfU*zPlate/intr.Fx, halfV*zPlate/intr.Fy
	const thick = 0.004
	plate := plateMesh(hx, hy, thick)
	return plate, mesh.Pose{R: mesh.Identity3(), T: centre}
}

// plateMesh returns a closed box [−hx, hx]×[−hy, hy]×[0, thick].
func plateMesh(hx, hy, thick float64) *mesh.Mesh {
	v := []r3.Vec{
		{X: -hx, Y: -hy}, {X: hx, Y: -hy}, {X: hx, Y: hy}, {X: -hx, Y: hy},
		{X: -hx, Y: -hy, Z: thick}, {X: hx, Y: -hy, Z: thick}, {X: hx, Y: hy, Z: thick}, {X: -hx, Y: hy, Z: thick},
	}
	f := []mesh.Face{
		{0, 2, 1}, {0, 3, 2}, // z = 0, facing −z (the camera)
		{4, 5, 6}, {4, 6, 7}, // z = thick
		{0, 1, 5}, {0, 5, 4}, {1, 2, 6}, {1, 6, 5},
		{2, 3, 7}, {2, 7, 6}, {3, 0, 4}, {3, 4, 7},
	}
	return &mesh.Mesh{Vertices: v, Faces: f}
}

// randomUnit returns a uniformly random unit vector.
func randomUnit(rng *rand.Rand) r3.Vec {
	for {
		v := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		if n := r3.Norm(v); n > 1e-9 {
			return r3.Scale(1/n, v)
		}
	}
}
