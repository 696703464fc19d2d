package validate

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// StableOptions tunes StablePoses.
type StableOptions struct {
	// CoplanarAngle merges adjacent hull triangles whose normals are
	// within this angle (radians) of the normal of the region's first,
	// largest triangle into one resting face: a flat face of a scanned
	// or extracted part is never exactly planar.
	// DEFAULT: 1° (0.01745 rad)
	CoplanarAngle float64
	// MinTipAngle is the smallest tipping angle (radians) of a resting
	// pose: the part must turn at least this far about an edge of its
	// resting face before its centre of mass passes over that edge. A
	// face whose tipping angle is smaller is treated as unstable and its
	// probability goes on to where it tips. This is our choice, not a
	// published value: a pose that a tilt of a few degrees topples is
	// not one a part keeps on a vibrating table or conveyor, and it
	// keeps the facets of a polygonised round side from counting as
	// separate resting poses (see StablePoses).
	// DEFAULT: 10° (0.1745 rad)
	MinTipAngle float64
	// TieAngle: edges whose tipping angles are within TieAngle of a
	// face's smallest share the face's probability equally (a face of a
	// symmetric part tips either way).
	// DEFAULT: 0.5° (0.008727 rad)
	TieAngle float64
}

// DefaultStableOptions returns the documented defaults of StableOptions.
func DefaultStableOptions() StableOptions {
	return StableOptions{
		CoplanarAngle: 1 * math.Pi / 180,
		MinTipAngle:   10 * math.Pi / 180,
		TieAngle:      0.5 * math.Pi / 180,
	}
}

// StablePose is one way the part comes to rest on a horizontal plane.
type StablePose struct {
	// ModelToSupport maps the part frame to a support frame whose plane
	// z = 0 is the support (z up, the part above it) and whose origin
	// is under the centre of mass. The rotation about the vertical is
	// arbitrary (the smallest rotation that brings the resting face's
	// normal to −z); a scene turns it about z at random.
	ModelToSupport mesh.Pose
	// Normal is the outward unit normal, in the part frame, of the
	// resting face: it points down into the support.
	Normal r3.Vec
	// Probability is the quasi-static probability of coming to rest in
	// this pose from a uniformly random orientation (see StablePoses).
	Probability float64
	// TipAngle is the pose's stability margin: the smallest rotation
	// (radians) about an edge of the resting face that brings the centre
	// of mass over that edge.
	TipAngle float64
	// Height is the height of the centre of mass above the support
	// (metres).
	Height float64
	// Area is the area of the resting face (of its convex outline, m²).
	Area float64
	// Rolls marks a resting band rather than a face: a ring of hull
	// faces each of which rolls onto the next (the polygonised side of
	// a long cylinder). The part lies on its side at an arbitrary roll
	// angle; ModelToSupport shows one of them, and Faces counts the
	// faces of the band.
	Rolls bool
	// Faces is the number of merged hull faces in the pose: 1, or the
	// size of a rolling band.
	Faces int
}

// StableResult is what StablePoses found.
type StableResult struct {
	// Poses are the resting poses, most probable first. Their
	// probabilities sum to 1.
	Poses []StablePose
	// CenterOfMass is the centre of mass used, part frame.
	CenterOfMass r3.Vec
	// MassFromHull reports that the mesh was not a closed solid, so the
	// centre of mass is that of its convex hull's solid (see
	// StablePoses).
	MassFromHull bool
	// Hull is the convex hull the poses were computed on.
	Hull *mesh.Mesh
}

// SolidCentroid returns the centre of mass and volume of the solid a
// closed triangle mesh bounds, at uniform density, in closed form by the
// divergence theorem: the solid is the signed sum of the tetrahedra
// (o, a, b, c) of every face with a reference point o, each of volume
// (a−o)·((b−o)×(c−o))/6 and centroid (o + a + b + c)/4 (handbook
// polyhedral mass properties, e.g. Mirtich 1996, "Fast and accurate
// computation of polyhedral mass properties", JGT 1(2), DOI
// 10.1080/10867651.1996.10487458). o is the mean vertex, which keeps the
// sums well conditioned far from the origin. An inward-oriented mesh
// gives the same centroid and a positive volume. It returns an error
// wrapping mesh.ErrDegenerate when the volume is zero. The mesh should
// be watertight; for an open mesh the result depends on o and means
// little (StablePoses then uses the hull).
func SolidCentroid(m *mesh.Mesh) (r3.Vec, float64, error) {
	if len(m.Vertices) == 0 {
		return r3.Vec{}, 0, fmt.Errorf("validate: centroid of an empty mesh: %w", mesh.ErrDegenerate)
	}
	var o r3.Vec
	for _, v := range m.Vertices {
		o = r3.Add(o, v)
	}
	o = r3.Scale(1/float64(len(m.Vertices)), o)
	var vol float64
	var mom r3.Vec
	for _, f := range m.Faces {
		a := r3.Sub(m.Vertices[f[0]], o)
		b := r3.Sub(m.Vertices[f[1]], o)
		c := r3.Sub(m.Vertices[f[2]], o)
		v := r3.Dot(a, r3.Cross(b, c)) / 6
		vol += v
		mom = r3.Add(mom, r3.Scale(v/4, r3.Add(r3.Add(a, b), c)))
	}
	scale := m.Bounds().Diagonal()
	if !(math.Abs(vol) > 1e-12*scale*scale*scale) {
		return r3.Vec{}, 0, fmt.Errorf("validate: solid of zero volume: %w", mesh.ErrDegenerate)
	}
	return r3.Add(o, r3.Scale(1/vol, mom)), math.Abs(vol), nil
}

// TriangleSolidAngle returns the solid angle (steradians) that triangle
// (a, b, c) subtends at p, positive when p lies behind the triangle's
// right-hand normal (so every face of a closed, outward-oriented mesh is
// positive seen from inside, and they add up to 4π). Van Oosterom & Strackee (1983, "The solid angle of
// a plane triangle", IEEE Trans. Biomed. Eng. BME-30(2), DOI
// 10.1109/TBME.1983.325207): with r_i the corners relative to p,
//
//	tan(Ω/2) = r₁·(r₂×r₃) / (|r₁||r₂||r₃| + (r₁·r₂)|r₃| + (r₁·r₃)|r₂| + (r₂·r₃)|r₁|)
func TriangleSolidAngle(p, a, b, c r3.Vec) float64 {
	r1, r2, r3v := r3.Sub(a, p), r3.Sub(b, p), r3.Sub(c, p)
	l1, l2, l3 := r3.Norm(r1), r3.Norm(r2), r3.Norm(r3v)
	num := r3.Dot(r1, r3.Cross(r2, r3v))
	den := l1*l2*l3 + r3.Dot(r1, r2)*l3 + r3.Dot(r1, r3v)*l2 + r3.Dot(r2, r3v)*l1
	return 2 * math.Atan2(num, den)
}

// restFace is a merged face of the hull.
type restFace struct {
	tris   []int   // hull triangles
	n      r3.Vec  // outward unit normal (area-weighted mean)
	d      float64 // support plane n·x = d (the face's outermost vertex)
	omega  float64 // solid angle from the centre of mass
	area   float64
	height float64
	poly   []r3.Vec  // convex outline in the plane, counter-clockwise about n
	tip    []float64 // tipping angle per outline edge poly[k]→poly[k+1]
	next   [][]int   // neighbouring faces across each outline edge
	minTip float64
}

// StablePoses returns the resting poses of the part m on a horizontal
// plane, with the probability of each, by the quasi-static estimator of
// Goldberg, Mirtich, Zhuang, Craig, Carlisle & Canny (1999, "Part pose
// statistics: estimators and experiments", IEEE Trans. Robotics and
// Automation 15(5)):
//
//  1. The part rests on its convex hull (ConvexHull of the vertices).
//     Adjacent hull triangles within CoplanarAngle are merged into
//     faces.
//  2. The centre of mass is that of the solid (SolidCentroid) when m is
//     watertight; otherwise, for an open scan or a mesh with holes,
//     that of the solid bounded by its convex hull, which is exact for
//     a convex part and an approximation otherwise (MassFromHull is
//     then set).
//  3. A face is a resting face when the centre of mass projects inside
//     it with a tipping angle of at least MinTipAngle about every edge.
//  4. A uniformly random initial orientation first touches the plane on
//     the face hit by the ray from the centre of mass along gravity, so
//     each face is first hit with probability Ω/4π, Ω its solid angle
//     seen from the centre of mass (TriangleSolidAngle summed over its
//     triangles). An unstable face tips over the edge of smallest
//     tipping angle onto the face beyond, and so on (quasi-static
//     rolling, each step lowering the centre of mass); a resting face
//     collects the probability of every face that rolls onto it.
//     Faces that roll onto each other in a ring (the facets of a
//     polygonised round side, each tipping less than MinTipAngle onto
//     its neighbour) form a band: if no face of the band can tip out of
//     it by less than MinTipAngle, the band is one resting pose with
//     Rolls set (a long cylinder lying on its side); otherwise the
//     band's probability goes out over its easiest exits.
//  5. Poses whose resting normals lie within 3·CoplanarAngle of each
//     other are merged into the more probable one.
//
// How polygonisation shows: a cylinder with n side facets has facets
// that tip onto their neighbours at 180°/n. With n < 18 they exceed the
// default MinTipAngle and count as n separate resting poses, each with
// 1/n of the side's probability (the part is then a prism). With finer
// facets they form a band; a long cylinder rests on it (one pose that
// rolls), a short wide one (a disc, tipping angle atan(h/2r) < 10°)
// topples off it onto its flat ends.
//
// Degenerate input (fewer than four points, all coplanar) gives an
// error wrapping mesh.ErrDegenerate.
func StablePoses(m *mesh.Mesh, opt StableOptions) (*StableResult, error) {
	if err := m.Validate(); err != nil {
		return nil, fmt.Errorf("validate: %w", err)
	}
	if !(opt.CoplanarAngle >= 0) || !(opt.MinTipAngle >= 0) || !(opt.TieAngle >= 0) {
		return nil, fmt.Errorf("validate: stable-pose options %+v: angles must be ≥ 0", opt)
	}
	hull, _, err := ConvexHull(m.Vertices)
	if err != nil {
		return nil, err
	}
	res := &StableResult{Hull: hull}
	com, _, err := SolidCentroid(m)
	if err != nil || !m.IsWatertight() {
		com, _, err = SolidCentroid(hull)
		if err != nil {
			return nil, err
		}
		res.MassFromHull = true
	}
	res.CenterOfMass = com
	faces := mergeHullFaces(hull, opt.CoplanarAngle)
	scale := hull.Bounds().Diagonal()
	for i := range faces {
		faces[i].measure(hull, com, scale)
	}
	linkFaces(hull, faces, scale)
	res.Poses = settle(faces, com, opt)
	return res, nil
}

// mergeHullFaces groups hull triangles by region growing: the largest
// unassigned triangle seeds a face, and neighbours join while their
// normal is within angle of the seed's.
func mergeHullFaces(hull *mesh.Mesh, angle float64) []restFace {
	nt := len(hull.Faces)
	normals := make([]r3.Vec, nt)
	areas := make([]float64, nt)
	for i, f := range hull.Faces {
		c := r3.Cross(r3.Sub(hull.Vertices[f[1]], hull.Vertices[f[0]]), r3.Sub(hull.Vertices[f[2]], hull.Vertices[f[0]]))
		areas[i] = r3.Norm(c) / 2
		normals[i] = mesh.Normalize(c)
	}
	adj := triangleAdjacency(hull)
	order := make([]int, nt)
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return areas[order[a]] > areas[order[b]] })
	label := make([]int, nt)
	for i := range label {
		label[i] = -1
	}
	cosMax := math.Cos(angle)
	var faces []restFace
	for _, seed := range order {
		if label[seed] >= 0 {
			continue
		}
		id := len(faces)
		rf := restFace{}
		label[seed] = id
		queue := []int{seed}
		var nsum r3.Vec
		for len(queue) > 0 {
			t := queue[0]
			queue = queue[1:]
			rf.tris = append(rf.tris, t)
			nsum = r3.Add(nsum, r3.Scale(areas[t], normals[t]))
			for _, u := range adj[t] {
				if u >= 0 && label[u] < 0 && r3.Dot(normals[u], normals[seed]) >= cosMax {
					label[u] = id
					queue = append(queue, u)
				}
			}
		}
		rf.n = mesh.Normalize(nsum)
		if rf.n == (r3.Vec{}) {
			rf.n = normals[seed]
		}
		faces = append(faces, rf)
	}
	return faces
}

// triangleAdjacency returns, per triangle, the triangle across each of
// its three edges (−1 for none).
func triangleAdjacency(m *mesh.Mesh) [][3]int {
	type key struct{ a, b uint32 }
	owner := make(map[key]int, 3*len(m.Faces))
	for i, f := range m.Faces {
		for k := 0; k < 3; k++ {
			owner[key{f[k], f[(k+1)%3]}] = i
		}
	}
	adj := make([][3]int, len(m.Faces))
	for i, f := range m.Faces {
		for k := 0; k < 3; k++ {
			if j, ok := owner[key{f[(k+1)%3], f[k]}]; ok {
				adj[i][k] = j
			} else {
				adj[i][k] = -1
			}
		}
	}
	return adj
}

// measure computes the face's plane, outline, area, solid angle from
// com, height of com above the plane and the tipping angle per outline
// edge.
func (rf *restFace) measure(hull *mesh.Mesh, com r3.Vec, scale float64) {
	rf.d = math.Inf(-1)
	seen := map[uint32]bool{}
	var verts []r3.Vec
	for _, t := range rf.tris {
		f := hull.Faces[t]
		a, b, c := hull.Vertices[f[0]], hull.Vertices[f[1]], hull.Vertices[f[2]]
		rf.omega += TriangleSolidAngle(com, a, b, c)
		for _, v := range f {
			if !seen[v] {
				seen[v] = true
				verts = append(verts, hull.Vertices[v])
				rf.d = math.Max(rf.d, r3.Dot(rf.n, hull.Vertices[v]))
			}
		}
	}
	rf.height = rf.d - r3.Dot(rf.n, com)
	// Outline: the 2-D convex hull (Andrew's monotone chain, Andrew 1979,
	// Inf. Proc. Letters 9(5), DOI 10.1016/0020-0190(79)90072-3) of the
	// vertices projected on the plane, in a basis (u, w) with u × w = n
	// so counter-clockwise in (u, w) is counter-clockwise about n.
	u, w := planeBasis(rf.n)
	pts := make([][2]float64, len(verts))
	for i, v := range verts {
		pts[i] = [2]float64{r3.Dot(v, u), r3.Dot(v, w)}
	}
	outline := convexHull2(pts, 1e-9*scale)
	rf.poly = make([]r3.Vec, len(outline))
	for i, p := range outline {
		rf.poly[i] = r3.Add(r3.Add(r3.Scale(p[0], u), r3.Scale(p[1], w)), r3.Scale(rf.d, rf.n))
	}
	rf.area = polygonArea2(outline)
	// Tipping angle about edge k: the centre of mass projected on the
	// plane lies at signed distance s inside the edge's line and height
	// h above the plane; the part turns by atan2(s, h) about the edge
	// before the centre of mass is over it.
	c2 := [2]float64{r3.Dot(com, u), r3.Dot(com, w)}
	rf.tip = make([]float64, len(outline))
	rf.minTip = math.Inf(1)
	for k := range outline {
		a, b := outline[k], outline[(k+1)%len(outline)]
		ex, ey := b[0]-a[0], b[1]-a[1]
		l := math.Hypot(ex, ey)
		s := (ex*(c2[1]-a[1]) - ey*(c2[0]-a[0])) / l // left of a→b is inside (CCW)
		rf.tip[k] = math.Atan2(s, rf.height)
		rf.minTip = math.Min(rf.minTip, rf.tip[k])
	}
	if len(outline) < 3 {
		rf.minTip = math.Inf(-1) // a sliver: never a resting face
	}
}

// planeBasis returns unit u, w with u × w = n.
func planeBasis(n r3.Vec) (u, w r3.Vec) {
	a := r3.Vec{X: 1}
	if math.Abs(n.X) > 0.9 {
		a = r3.Vec{Y: 1}
	}
	u = mesh.Normalize(r3.Cross(a, n))
	w = r3.Cross(n, u)
	return u, w
}

// convexHull2 returns the convex hull of 2-D points counter-clockwise,
// without collinear points (cross products within tol·|edge| dropped).
func convexHull2(p [][2]float64, tol float64) [][2]float64 {
	pts := append([][2]float64(nil), p...)
	sort.Slice(pts, func(i, j int) bool {
		if pts[i][0] != pts[j][0] {
			return pts[i][0] < pts[j][0]
		}
		return pts[i][1] < pts[j][1]
	})
	if len(pts) < 3 {
		return pts
	}
	cross := func(o, a, b [2]float64) float64 {
		return (a[0]-o[0])*(b[1]-o[1]) - (a[1]-o[1])*(b[0]-o[0])
	}
	keep := func(o, a, b [2]float64) bool {
		// b turns left of o→a by more than tol (relative to |o→b|).
		return cross(o, a, b) > tol*math.Hypot(b[0]-o[0], b[1]-o[1])
	}
	var lower, upper [][2]float64
	for _, q := range pts {
		for len(lower) >= 2 && !keep(lower[len(lower)-2], lower[len(lower)-1], q) {
			lower = lower[:len(lower)-1]
		}
		lower = append(lower, q)
	}
	for i := len(pts) - 1; i >= 0; i-- {
		q := pts[i]
		for len(upper) >= 2 && !keep(upper[len(upper)-2], upper[len(upper)-1], q) {
			upper = upper[:len(upper)-1]
		}
		upper = append(upper, q)
	}
	return append(lower[:len(lower)-1], upper[:len(upper)-1]...)
}

func polygonArea2(p [][2]float64) float64 {
	var a float64
	for i := range p {
		j := (i + 1) % len(p)
		a += p[i][0]*p[j][1] - p[j][0]*p[i][1]
	}
	return math.Abs(a) / 2
}

// linkFaces finds, for each outline edge of each face, the face the
// part tips onto over that edge: among the neighbouring faces across
// hull edges lying on the outline edge's line, the one whose normal is
// closest to the face's (the first reached when turning about the
// edge); if the outline edge spans no hull edge exactly (a face merged
// from slightly bent triangles), the neighbour whose normal leans most
// toward the edge's outward direction.
func linkFaces(hull *mesh.Mesh, faces []restFace, scale float64) {
	label := make([]int, len(hull.Faces))
	for id, rf := range faces {
		for _, t := range rf.tris {
			label[t] = id
		}
	}
	adj := triangleAdjacency(hull)
	lineTol := 1e-6 * scale
	for id := range faces {
		rf := &faces[id]
		type border struct {
			a, b r3.Vec
			g    int
		}
		var borders []border
		for _, t := range rf.tris {
			f := hull.Faces[t]
			for k := 0; k < 3; k++ {
				u := adj[t][k]
				if u < 0 || label[u] == id {
					continue
				}
				borders = append(borders, border{hull.Vertices[f[k]], hull.Vertices[f[(k+1)%3]], label[u]})
			}
		}
		rf.next = make([][]int, len(rf.poly))
		for k := range rf.poly {
			a, b := rf.poly[k], rf.poly[(k+1)%len(rf.poly)]
			dir := mesh.Normalize(r3.Sub(b, a))
			out := r3.Cross(dir, rf.n) // outward in-plane normal of a CCW edge
			best, bestDot := -1, math.Inf(-1)
			for _, br := range borders {
				if lineDist(br.a, a, dir) < lineTol && lineDist(br.b, a, dir) < lineTol {
					if d := r3.Dot(faces[br.g].n, rf.n); d > bestDot {
						best, bestDot = br.g, d
					}
				}
			}
			if best < 0 {
				for _, br := range borders {
					if d := r3.Dot(faces[br.g].n, out); d > bestDot {
						best, bestDot = br.g, d
					}
				}
			}
			if best >= 0 {
				rf.next[k] = []int{best}
			}
		}
	}
}

func lineDist(p, a, dir r3.Vec) float64 {
	v := r3.Sub(p, a)
	return r3.Norm(r3.Sub(v, r3.Scale(r3.Dot(v, dir), dir)))
}

// settle runs the quasi-static rolling and returns the resting poses.
func settle(faces []restFace, com r3.Vec, opt StableOptions) []StablePose {
	n := len(faces)
	// Out-edges: a face below MinTipAngle tips over its easiest edges.
	out := make([][]int, n)
	for i := range faces {
		rf := &faces[i]
		if rf.minTip >= opt.MinTipAngle {
			continue
		}
		for k, t := range rf.tip {
			if t <= rf.minTip+opt.TieAngle && len(rf.next[k]) > 0 {
				out[i] = append(out[i], rf.next[k][0])
			}
		}
	}
	// A band that topples adds its exit edges to the graph, which may
	// join its exits into a larger band; repeat until nothing changes,
	// so that every edge mass flows along is in the graph and the
	// components stay in topological order.
	var comp []int
	var ncomp int
	var members [][]int
	for iter := 0; ; iter++ {
		comp, ncomp = tarjan(out)
		members = make([][]int, ncomp)
		for i, c := range comp {
			members[c] = append(members[c], i)
		}
		changed := false
		for _, ms := range members {
			if len(ms) < 2 {
				continue
			}
			exits, minOut := bandExits(faces, ms, opt)
			if minOut >= opt.MinTipAngle {
				continue
			}
			for _, e := range exits {
				if !containsInt(out[e[0]], e[1]) {
					out[e[0]] = append(out[e[0]], e[1])
					changed = true
				}
			}
		}
		if !changed || iter > len(faces) {
			break
		}
	}
	mass := make([]float64, ncomp)
	for i := range faces {
		mass[comp[i]] += faces[i].omega / (4 * math.Pi)
	}
	// Tarjan numbers components in reverse topological order (a
	// component is finished after everything it reaches), so walking
	// from the highest number pushes mass downstream in order.
	var poses []StablePose
	for c := ncomp - 1; c >= 0; c-- {
		ms := members[c]
		band := len(ms) > 1
		if !band {
			i := ms[0]
			if len(out[i]) == 0 {
				if faces[i].minTip >= opt.MinTipAngle || mass[c] > 0 {
					poses = append(poses, makePose(&faces[i], com, mass[c], faces[i].minTip, false, 1))
				}
				continue
			}
			share := mass[c] / float64(len(out[i]))
			for _, j := range out[i] {
				mass[comp[j]] += share
			}
			continue
		}
		// A band: a resting pose, or it topples over its easiest exits.
		exits, minOut := bandExits(faces, ms, opt)
		if minOut >= opt.MinTipAngle || len(exits) == 0 {
			rep := ms[0]
			for _, i := range ms {
				if faces[i].omega > faces[rep].omega {
					rep = i
				}
			}
			poses = append(poses, makePose(&faces[rep], com, mass[c], minOut, true, len(ms)))
			continue
		}
		share := mass[c] / float64(len(exits))
		for _, e := range exits {
			mass[comp[e[1]]] += share
		}
	}
	sort.SliceStable(poses, func(a, b int) bool { return poses[a].Probability > poses[b].Probability })
	// Poses whose resting normals are within 3·CoplanarAngle are one
	// pose found twice (a small group of nearly coplanar hull faces
	// beside a large face, rocking between themselves): the less
	// probable gives its probability to the more probable.
	cosMerge := math.Cos(3 * opt.CoplanarAngle)
	var merged []StablePose
	for _, p := range poses {
		dup := false
		for k := range merged {
			if r3.Dot(merged[k].Normal, p.Normal) >= cosMerge {
				merged[k].Probability += p.Probability
				dup = true
				break
			}
		}
		if !dup {
			merged = append(merged, p)
		}
	}
	return merged
}

// bandExits returns the edges (member, face beyond) by which the band
// ms can tip out of itself with the smallest tipping angle (within
// TieAngle), and that angle (+Inf when the band has no way out).
func bandExits(faces []restFace, ms []int, opt StableOptions) ([][2]int, float64) {
	inBand := map[int]bool{}
	for _, i := range ms {
		inBand[i] = true
	}
	minOut := math.Inf(1)
	for _, i := range ms {
		for k, t := range faces[i].tip {
			if len(faces[i].next[k]) > 0 && !inBand[faces[i].next[k][0]] {
				minOut = math.Min(minOut, t)
			}
		}
	}
	var exits [][2]int
	for _, i := range ms {
		for k, t := range faces[i].tip {
			if len(faces[i].next[k]) > 0 && !inBand[faces[i].next[k][0]] && t <= minOut+opt.TieAngle {
				exits = append(exits, [2]int{i, faces[i].next[k][0]})
			}
		}
	}
	return exits, minOut
}

func containsInt(s []int, v int) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// makePose builds the StablePose resting on rf.
func makePose(rf *restFace, com r3.Vec, p, tip float64, rolls bool, nfaces int) StablePose {
	r := rotationTo(rf.n, r3.Vec{Z: -1})
	rc := r.MulVec(com)
	return StablePose{
		ModelToSupport: mesh.Pose{R: r, T: r3.Vec{X: -rc.X, Y: -rc.Y, Z: rf.d}},
		Normal:         rf.n,
		Probability:    p,
		TipAngle:       tip,
		Height:         rf.height,
		Area:           rf.area,
		Rolls:          rolls,
		Faces:          nfaces,
	}
}

// rotationTo returns the smallest rotation taking unit a to unit b (a
// half turn about an axis perpendicular to a when they are opposite).
func rotationTo(a, b r3.Vec) mesh.Mat3 {
	c := r3.Dot(a, b)
	axis := r3.Cross(a, b)
	s := r3.Norm(axis)
	if s < 1e-12 {
		if c > 0 {
			return mesh.Identity3()
		}
		u, _ := planeBasis(a)
		return mesh.RotationFromAxisAngle(u, math.Pi)
	}
	return mesh.RotationFromAxisAngle(axis, math.Atan2(s, c))
}

// tarjan returns the strongly connected component of every node of the
// directed graph out, numbered in the order Tarjan's algorithm (1972,
// SIAM J. Comput. 1(2), DOI 10.1137/0201010) completes them, which is a
// reverse topological order of the condensation.
func tarjan(out [][]int) ([]int, int) {
	n := len(out)
	index := make([]int, n)
	low := make([]int, n)
	onStack := make([]bool, n)
	comp := make([]int, n)
	for i := range index {
		index[i] = -1
	}
	var stack []int
	next, ncomp := 0, 0
	type frame struct{ v, k int }
	for s := 0; s < n; s++ {
		if index[s] >= 0 {
			continue
		}
		call := []frame{{s, 0}}
		index[s], low[s] = next, next
		next++
		stack = append(stack, s)
		onStack[s] = true
		for len(call) > 0 {
			top := &call[len(call)-1]
			v := top.v
			if top.k < len(out[v]) {
				w := out[v][top.k]
				top.k++
				if index[w] < 0 {
					index[w], low[w] = next, next
					next++
					stack = append(stack, w)
					onStack[w] = true
					call = append(call, frame{w, 0})
				} else if onStack[w] {
					low[v] = min(low[v], index[w])
				}
				continue
			}
			if low[v] == index[v] {
				for {
					w := stack[len(stack)-1]
					stack = stack[:len(stack)-1]
					onStack[w] = false
					comp[w] = ncomp
					if w == v {
						break
					}
				}
				ncomp++
			}
			call = call[:len(call)-1]
			if len(call) > 0 {
				u := call[len(call)-1].v
				low[u] = min(low[u], low[v])
			}
		}
	}
	return comp, ncomp
}
