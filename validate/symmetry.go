package validate

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// SymmetryOptions tunes DetectSymmetry.
type SymmetryOptions struct {
	// Spacing is the distance between the surface samples the
	// self-alignment is measured on (metres); 0 means SpacingFraction
	// times the mesh diameter.
	// DEFAULT: 0
	Spacing float64
	// SpacingFraction sets the spacing when Spacing is 0.
	// DEFAULT: 0.02 (a few thousand points on a compact part)
	SpacingFraction float64
	// Resolution is the mesh's own resolution in metres (the voxel size
	// of a fused scan, the grid step of an extracted surface): two
	// tessellations of the same surface differ by a fraction of it, so
	// it widens the tolerances (see DetectSymmetry).
	// DEFAULT: 0
	Resolution float64
	// MeanFactor and P95Factor bound how much worse than the baseline a
	// symmetric rotation may align (see DetectSymmetry).
	// DEFAULT: 1.3 and 1.5
	MeanFactor, P95Factor float64
	// MaxFold is the largest n tested for n-fold symmetry (from 2).
	// DEFAULT: 12
	MaxFold int
	// ColorThreshold is the ColorDistance above which the colours of a
	// matched pair of points differ.
	// DEFAULT: 0.2
	ColorThreshold float64
	// ColorFraction is the share of the surface whose colour may differ
	// under a rotation, beyond the baseline of the identity, before the
	// colour breaks the symmetry: a label or mark that covers more than
	// this share tells the poses apart.
	// DEFAULT: 0.01
	ColorFraction float64
	// Color weighs the colour distance.
	// DEFAULT: DefaultColorWeights()
	Color ColorWeights
	// Seed seeds the two surface samplings.
	// DEFAULT: 1
	Seed uint64
}

// DefaultSymmetryOptions returns the documented defaults.
func DefaultSymmetryOptions() SymmetryOptions {
	return SymmetryOptions{
		SpacingFraction: 0.02,
		MeanFactor:      1.3,
		P95Factor:       1.5,
		MaxFold:         12,
		ColorThreshold:  0.2,
		ColorFraction:   0.01,
		Color:           DefaultColorWeights(),
		Seed:            1,
	}
}

// maxFoldLimit bounds MaxFold: beyond it a rotation by 2π/n moves a
// point by less than the sampling can tell from the continuous case.
const maxFoldLimit = 64

// SymmetryAxis is one axis of rotational symmetry of a part.
type SymmetryAxis struct {
	// Axis is the unit direction (part frame) and Point a point on the
	// axis (the area centroid of the surface, through which every
	// symmetry axis passes).
	Axis, Point r3.Vec
	// Fold is the order of the symmetry: n ≥ 2 for n-fold (rotations by
	// 360°/n map the part onto itself), 0 for continuous (every angle).
	Fold int
	// Mean and P95 are the mean and 95th percentile of the distance from
	// each rotated sample to the nearest sample of an independent second
	// sampling, for the rotation by 360°/Fold (the worst tested angle
	// for a continuous axis), metres.
	Mean, P95 float64
	// ColorMismatch is the share of the surface whose colour differs
	// under that rotation, less the share that differs under the
	// identity (sampling and colour noise); 0 without colours.
	ColorMismatch float64
}

// Rotation returns the rotation of the axis by angle radians as a pose
// of the part frame: x ↦ R·(x − Point) + Point.
func (a SymmetryAxis) Rotation(angle float64) mesh.Pose {
	r := mesh.RotationFromAxisAngle(a.Axis, angle)
	return mesh.Pose{R: r, T: r3.Sub(a.Point, r.MulVec(a.Point))}
}

// SymmetryReport is what DetectSymmetry found.
type SymmetryReport struct {
	// Geometry lists the axes about which the shape is symmetric, the
	// highest fold first (continuous before n-fold).
	Geometry []SymmetryAxis
	// Color lists the axes about which shape and colour together are
	// symmetric, with the fold the colour allows (which divides the
	// geometric fold; a continuous geometric axis may keep a finite
	// colour fold). Nil when the mesh has no colours.
	Color []SymmetryAxis
	// HasColor reports that the mesh had vertex colours.
	HasColor bool
	// Spacing is the sampling spacing used; Baseline and BaselineP95 the
	// mean and 95th-percentile distance between the two samplings under
	// the identity (what a perfect symmetry gives), metres.
	Spacing, Baseline, BaselineP95 float64
	// ColorBaseline is the share of points whose colour differs from
	// their nearest neighbour in the other sampling under the identity.
	ColorBaseline float64
	// Diameter is the mesh diameter.
	Diameter float64
}

// ColorBreaks reports whether the colour breaks a geometric symmetry:
// some geometric axis is missing from Color or keeps a lower fold there.
func (r *SymmetryReport) ColorBreaks() bool {
	if !r.HasColor {
		return false
	}
	for _, g := range r.Geometry {
		found := false
		for _, c := range r.Color {
			if math.Abs(r3.Dot(g.Axis, c.Axis)) > math.Cos(2*math.Pi/180) && c.Fold == g.Fold {
				found = true
			}
		}
		if !found {
			return true
		}
	}
	return false
}

// GeometryPoses returns the symmetry group of the geometry as part-frame
// poses (identity first), generated from the axes; a continuous axis is
// discretised into steps rotations (ContinuousSymmetrySteps gives the
// BOP step count).
func (r *SymmetryReport) GeometryPoses(steps int) ([]mesh.Pose, error) {
	return axesGroup(r.Geometry, steps, r.Diameter)
}

// ColorPoses returns the symmetry group of shape and colour together,
// as GeometryPoses does for the geometry alone. Without colours it is
// the geometry's group.
func (r *SymmetryReport) ColorPoses(steps int) ([]mesh.Pose, error) {
	if !r.HasColor {
		return r.GeometryPoses(steps)
	}
	return axesGroup(r.Color, steps, r.Diameter)
}

func axesGroup(axes []SymmetryAxis, steps int, diameter float64) ([]mesh.Pose, error) {
	var gens []mesh.Pose
	for _, a := range axes {
		n := a.Fold
		if n == 0 {
			n = max(steps, 1)
		}
		gens = append(gens, a.Rotation(2*math.Pi/float64(n)))
	}
	// Rotation tolerance: axes found by search and ICP are accurate to a
	// small fraction of a degree, so elements within 1° (or a third of
	// the continuous step, if smaller) are one; translation: 1 % of the
	// diameter (every axis passes through the same centroid).
	tol := math.Pi / 180
	if steps > 0 {
		tol = math.Min(tol, 2*math.Pi/float64(steps)/3)
	}
	return SymmetryPoses(gens, tol, 0.01*math.Max(diameter, 1e-9))
}

// symSampler holds the two samplings and their k-d tree.
type symSampler struct {
	a, b     *mesh.Cloud
	tree     *mesh.KDTree
	hsvA     []HSV
	hsvB     []HSV
	sub      []int // indices of a for screening
	d        []float64
	opt      SymmetryOptions
	spacing  float64
	baseMean float64
	baseP95  float64
	baseCol  float64
	tolMean  float64
	tolP95   float64
}

// DetectSymmetry finds the rotational symmetries of a part's surface by
// self-alignment, separately for its geometry and for geometry with
// colour.
//
// The surface is sampled twice, independently (mesh.Sample with seeds
// Seed and Seed+1, the same spacing, each sample with its face's normal). A rigid
// motion T is a symmetry when the first sampling moved by T lies on the
// surface of the second as well as the unmoved first sampling does. The
// distance of a moved sample q to that surface is measured to the
// tangent plane of its nearest sample b, |(q − b)·n_b|, which does not
// see the in-plane offset between the two samplings (about half the
// spacing) and so shows small departures: with m and p the mean and
// 95th percentile of that distance, T passes when
//
//	m ≤ MeanFactor·m₀ + 0.02·spacing + 0.25·Resolution
//	p ≤ P95Factor·p₀ + 0.1·spacing + 0.75·Resolution
//
// where m₀ and p₀ are the same statistics for T = identity (the
// baseline: curvature and edges between samples). The spacing terms
// allow for the tessellation (the part and its rotated copy cut by
// different triangles); the Resolution terms for a surface with noise of
// its own (a fused scan, whose noise the two samplings of one mesh share
// but a symmetric copy does not). On the demo parts meshed by marching
// cubes at 0.5 mm, true symmetries measure within 15 % of the baseline
// (means of 0.01–0.03 mm) and the closest false one, the hex nut turned
// by 360°/7, a mean of 0.2 mm, four times the tolerance.
//
// Candidate axes pass through the surface's area centroid along the
// principal axes of its area-weighted second moment, computed in closed
// form from the triangles (∫x xᵀ dA = A/12·(Σ vᵢvᵢᵀ + s sᵀ), s = Σ vᵢ,
// per triangle): the moment tensor is invariant under every symmetry of
// the part, so every axis of an n-fold symmetry is one of its
// eigenvectors, and for n ≥ 3 the plane perpendicular to it is an
// eigenspace. Where two eigenvalues agree (within 5 %) every direction
// in their plane is a candidate and is screened at 1° steps for half
// turns (the perpendicular axes of a dihedral symmetry); where all three
// agree, 400 directions over the half sphere are screened for 2- to
// 5-fold turns. On each candidate axis, rotations by three mutually
// incommensurate angles (1, √2 and π/√5 rad) passing means a continuous
// symmetry; otherwise the fold is the largest n ≤ MaxFold whose
// rotations by k·360°/n all pass (k = 1 … n/2; the others are their
// inverses). A candidate that nearly passes (within three
// times the tolerances) is refined by point-to-plane ICP of the first
// sampling onto the second (mesh.ICPPointToPlane) and tested again, so
// a slightly tilted principal axis (a noisy scan) still counts.
//
// Colour: for each geometric axis, the share of samples whose colour
// differs (ColorDistance above ColorThreshold) from their match under
// the rotation, less that share under the identity, must stay below
// ColorFraction; the colour fold is the largest divisor of the
// geometric fold that passes (for a continuous axis: continuous, or the
// largest n ≤ MaxFold that passes).
//
// A mesh of zero area gives an error wrapping mesh.ErrDegenerate.
func DetectSymmetry(m *mesh.Mesh, opt SymmetryOptions) (*SymmetryReport, error) {
	if err := m.Validate(); err != nil {
		return nil, fmt.Errorf("validate: %w", err)
	}
	if opt.MaxFold < 2 || opt.MaxFold > maxFoldLimit {
		return nil, fmt.Errorf("validate: symmetry MaxFold %d, want 2..%d", opt.MaxFold, maxFoldLimit)
	}
	if !(opt.MeanFactor >= 1) || !(opt.P95Factor >= 1) || !(opt.Resolution >= 0) {
		return nil, fmt.Errorf("validate: symmetry tolerances MeanFactor %v, P95Factor %v (want ≥ 1), Resolution %v (want ≥ 0)", opt.MeanFactor, opt.P95Factor, opt.Resolution)
	}
	centroid, cov, area := surfaceMoments(m)
	if !(area > 0) {
		return nil, fmt.Errorf("validate: symmetry of a surface of zero area: %w", mesh.ErrDegenerate)
	}
	so := mesh.DefaultSampleOptions()
	so.Spacing = opt.Spacing
	if so.Spacing == 0 {
		so.SpacingFraction = opt.SpacingFraction
	}
	so.Seed = opt.Seed
	// Face normals: exact on the flat faces of a coarse CAD mesh, whose
	// vertex normals average across its edges.
	so.Normals = mesh.NormalsFace
	a, spacing, err := mesh.Sample(m, so)
	if err != nil {
		return nil, fmt.Errorf("validate: symmetry sampling: %w", err)
	}
	so.Spacing = spacing
	so.Seed = opt.Seed + 1
	b, _, err := mesh.Sample(m, so)
	if err != nil {
		return nil, fmt.Errorf("validate: symmetry sampling: %w", err)
	}
	s := &symSampler{a: a, b: b, tree: mesh.NewKDTree(b.Points), opt: opt, d: make([]float64, len(a.Points))}
	hasColor := len(m.Colors) == len(m.Vertices) && len(a.Colors) == len(a.Points) && len(b.Colors) == len(b.Points)
	if hasColor {
		s.hsvA = make([]HSV, len(a.Colors))
		for i, c := range a.Colors {
			s.hsvA[i] = HSVFromRGB(c)
		}
		s.hsvB = make([]HSV, len(b.Colors))
		for i, c := range b.Colors {
			s.hsvB[i] = HSVFromRGB(c)
		}
	}
	// A fixed subset of about 400 points for screening.
	step := max(1, len(a.Points)/400)
	for i := 0; i < len(a.Points); i += step {
		s.sub = append(s.sub, i)
	}
	s.baseMean, s.baseP95 = s.stats(mesh.Identity(), nil)
	s.spacing = spacing
	s.tolMean = opt.MeanFactor*s.baseMean + 0.02*spacing + 0.25*opt.Resolution
	s.tolP95 = opt.P95Factor*s.baseP95 + 0.1*spacing + 0.75*opt.Resolution
	if hasColor {
		s.baseCol = s.colorMismatch(mesh.Identity())
	}
	rep := &SymmetryReport{
		HasColor: hasColor, Spacing: spacing, Baseline: s.baseMean, BaselineP95: s.baseP95,
		ColorBaseline: s.baseCol, Diameter: m.Diameter(),
	}

	var main *SymmetryAxis // the unique axis beside a degenerate plane
	for _, c := range candidateAxes(cov) {
		switch {
		case c.screen && c.plane:
			// Half turns about axes in the plane perpendicular to the
			// unique axis. Two such axes at angle φ would make a rotation
			// by 2φ about the unique axis, so the best one found, turned
			// by multiples of 180°/n about an n-fold unique axis, gives
			// all of them (the dihedral group D_n); about a continuous or
			// asymmetric unique axis one is kept (for a continuous axis
			// it implies every perpendicular half turn).
			found := s.screen(centroid, c)
			if len(found) == 0 {
				continue
			}
			best := found[0]
			for _, f := range found[1:] {
				if f.Mean < best.Mean {
					best = f
				}
			}
			// Make the flip exactly perpendicular to the unique axis.
			best.Axis = mesh.Normalize(r3.Sub(best.Axis, r3.Scale(r3.Dot(best.Axis, c.dir), c.dir)))
			rep.Geometry = addAxis(rep.Geometry, best)
			if main != nil && main.Fold >= 2 {
				for k := 1; k < main.Fold; k++ {
					f := best
					f.Axis = mesh.RotationFromAxisAngle(main.Axis, float64(k)*math.Pi/float64(main.Fold)).MulVec(best.Axis)
					if mean, p95 := s.stats(f.Rotation(math.Pi), nil); mean <= s.tolMean && p95 <= s.tolP95 {
						f.Mean, f.P95 = mean, p95
						rep.Geometry = addAxis(rep.Geometry, f)
					}
				}
			}
		case c.screen:
			for _, ax := range s.screen(centroid, c) {
				rep.Geometry = addAxis(rep.Geometry, ax)
			}
		default:
			if ax, ok := s.testAxis(centroid, c.dir, 2, opt.MaxFold, false); ok {
				rep.Geometry = addAxis(rep.Geometry, ax)
				main = &ax
			}
		}
	}
	sort.SliceStable(rep.Geometry, func(i, j int) bool { return foldRank(rep.Geometry[i].Fold) > foldRank(rep.Geometry[j].Fold) })
	if hasColor {
		for _, g := range rep.Geometry {
			if c, ok := s.colorFold(g); ok {
				rep.Color = append(rep.Color, c)
			}
		}
	}
	return rep, nil
}

func foldRank(n int) int {
	if n == 0 {
		return math.MaxInt
	}
	return n
}

// addAxis adds ax unless an axis within 2° is already listed (keeping
// the higher fold).
func addAxis(list []SymmetryAxis, ax SymmetryAxis) []SymmetryAxis {
	for i, o := range list {
		if math.Abs(r3.Dot(o.Axis, ax.Axis)) > math.Cos(2*math.Pi/180) {
			if foldRank(ax.Fold) > foldRank(o.Fold) {
				list[i] = ax
			}
			return list
		}
	}
	return append(list, ax)
}

// surfaceMoments returns the area centroid and the covariance (second
// central moment per unit area) of the surface, in closed form.
func surfaceMoments(m *mesh.Mesh) (r3.Vec, [3][3]float64, float64) {
	var area float64
	var first r3.Vec
	var second [3][3]float64
	var o r3.Vec
	for _, v := range m.Vertices {
		o = r3.Add(o, v)
	}
	if len(m.Vertices) > 0 {
		o = r3.Scale(1/float64(len(m.Vertices)), o)
	}
	for _, f := range m.Faces {
		a := r3.Sub(m.Vertices[f[0]], o)
		b := r3.Sub(m.Vertices[f[1]], o)
		c := r3.Sub(m.Vertices[f[2]], o)
		ar := r3.Norm(r3.Cross(r3.Sub(b, a), r3.Sub(c, a))) / 2
		if !(ar > 0) {
			continue
		}
		area += ar
		sum := r3.Add(r3.Add(a, b), c)
		first = r3.Add(first, r3.Scale(ar/3, sum))
		va := [4][3]float64{{a.X, a.Y, a.Z}, {b.X, b.Y, b.Z}, {c.X, c.Y, c.Z}, {sum.X, sum.Y, sum.Z}}
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				var s float64
				for k := 0; k < 4; k++ {
					s += va[k][i] * va[k][j]
				}
				second[i][j] += ar / 12 * s
			}
		}
	}
	if !(area > 0) {
		return o, second, 0
	}
	mean := r3.Scale(1/area, first)
	mv := [3]float64{mean.X, mean.Y, mean.Z}
	var cov [3][3]float64
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			cov[i][j] = second[i][j]/area - mv[i]*mv[j]
		}
	}
	return r3.Add(o, mean), cov, area
}

type candidate struct {
	dir    r3.Vec
	screen bool   // search a plane (normal dir) or the half sphere (dir zero)
	plane  bool   // screen the plane perpendicular to dir
	folds  [2]int // folds to screen
}

// candidateAxes returns the principal axes, and screening tasks for
// degenerate eigenspaces.
func candidateAxes(cov [3][3]float64) []candidate {
	sym := mat.NewSymDense(3, []float64{
		cov[0][0], cov[0][1], cov[0][2],
		cov[1][0], cov[1][1], cov[1][2],
		cov[2][0], cov[2][1], cov[2][2],
	})
	var es mat.EigenSym
	if !es.Factorize(sym, true) {
		return []candidate{{screen: true, folds: [2]int{2, 5}}}
	}
	vals := es.Values(nil)
	var vecs mat.Dense
	es.VectorsTo(&vecs)
	vec := func(k int) r3.Vec {
		return mesh.Normalize(r3.Vec{X: vecs.At(0, k), Y: vecs.At(1, k), Z: vecs.At(2, k)})
	}
	// Eigenvalues ascending. Degenerate when within 5 % of the largest.
	tol := 0.05 * math.Max(math.Abs(vals[2]), 1e-300)
	same01 := vals[1]-vals[0] <= tol
	same12 := vals[2]-vals[1] <= tol
	switch {
	case same01 && same12:
		return []candidate{{screen: true, folds: [2]int{2, 5}}}
	case same01:
		return []candidate{{dir: vec(2)}, {dir: vec(2), screen: true, plane: true, folds: [2]int{2, 2}}}
	case same12:
		return []candidate{{dir: vec(0)}, {dir: vec(0), screen: true, plane: true, folds: [2]int{2, 2}}}
	}
	return []candidate{{dir: vec(0)}, {dir: vec(1)}, {dir: vec(2)}}
}

// stats returns the mean and 95th percentile of the distance from each
// point of a (or of the subset idx) moved by t to the surface of b: the
// distance to the tangent plane of the nearest point of b, |(q − b)·n|
// (or to the nearest point itself when b has no normals).
func (s *symSampler) stats(t mesh.Pose, idx []int) (float64, float64) {
	d := s.d[:0]
	var sum float64
	one := func(p r3.Vec) {
		q := t.Apply(p)
		j, d2 := s.tree.Nearest(q)
		x := math.Sqrt(d2)
		if s.b.Normals != nil {
			x = math.Abs(r3.Dot(r3.Sub(q, s.b.Points[j]), s.b.Normals[j]))
		}
		d = append(d, x)
		sum += x
	}
	if idx == nil {
		for _, p := range s.a.Points {
			one(p)
		}
	} else {
		for _, i := range idx {
			one(s.a.Points[i])
		}
	}
	if len(d) == 0 {
		return 0, 0
	}
	mean := sum / float64(len(d))
	k := int(math.Ceil(0.95*float64(len(d)))) - 1
	return mean, quickSelect(d, max(k, 0))
}

// quickSelect returns the k-th smallest of x (reordering x).
func quickSelect(x []float64, k int) float64 {
	lo, hi := 0, len(x)-1
	for lo < hi {
		p := x[(lo+hi)/2]
		i, j := lo, hi
		for i <= j {
			for x[i] < p {
				i++
			}
			for x[j] > p {
				j--
			}
			if i <= j {
				x[i], x[j] = x[j], x[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return x[k]
		}
	}
	return x[k]
}

// passes tests the motion t on all points, refining it by ICP when it
// nearly passes. It returns the statistics of the (possibly refined)
// motion and whether it is a symmetry.
func (s *symSampler) passes(t mesh.Pose, refine bool) (mesh.Pose, float64, float64, bool) {
	mean, p95 := s.stats(t, nil)
	ok := mean <= s.tolMean && p95 <= s.tolP95
	if (ok && !refine) || mean > 3*s.tolMean || s.b.Normals == nil {
		return t, mean, p95, ok
	}
	icp := mesh.DefaultICPOptions()
	icp.MaxIterations = 15
	icp.MaxDistance = 3 * s.spacing
	icp.HuberDelta = s.spacing / 4
	r, err := mesh.ICPPointToPlane(s.a, s.b, s.tree, t, icp)
	// The refinement may only adjust the motion, not find another one,
	// and must improve it.
	if err != nil || mesh.RotationAngle(r.Pose, t) > 5*math.Pi/180 {
		return t, mean, p95, ok
	}
	m2, q2 := s.stats(r.Pose, nil)
	if m2 > mean {
		return t, mean, p95, ok
	}
	return r.Pose, m2, q2, m2 <= s.tolMean && q2 <= s.tolP95
}

// incommensurate angles for the continuous test (radians): no two are
// rational multiples of each other or of π.
var incommensurate = [3]float64{1, math.Sqrt2, math.Pi / math.Sqrt(5)}

// testAxis tests the axis through c along dir for continuous and n-fold
// symmetry with n from maxN down to minN; refine runs ICP on every
// n-fold test (for axes from a coarse search).
func (s *symSampler) testAxis(c, dir r3.Vec, minN, maxN int, refine bool) (SymmetryAxis, bool) {
	ax := SymmetryAxis{Axis: dir, Point: c}
	cont := true
	var worstMean, worstP95 float64
	for _, ang := range incommensurate {
		_, mean, p95, ok := s.passes(ax.Rotation(ang), false)
		if !ok {
			cont = false
			break
		}
		worstMean, worstP95 = math.Max(worstMean, mean), math.Max(worstP95, p95)
	}
	if cont {
		ax.Fold, ax.Mean, ax.P95 = 0, worstMean, worstP95
		return ax, true
	}
	for n := maxN; n >= minN; n-- {
		t, mean, p95, ok := s.passes(ax.Rotation(2*math.Pi/float64(n)), refine)
		if ok {
			if axis, ang := t.R.AxisAngle(); ang > 1e-6 {
				if r3.Dot(axis, dir) < 0 {
					axis = r3.Scale(-1, axis)
				}
				ax.Axis = axis
			}
			ax.Fold, ax.Mean, ax.P95 = n, mean, p95
			if s.wholeGroup(ax) {
				return ax, true
			}
		}
	}
	return ax, false
}

// wholeGroup reports whether every rotation of the axis's n-fold group
// passes, not only the one by 360°/n: on a surface the fusion rounded
// off, a hexagon's turn by 360°/7 can come within the tolerance (8.6°
// from 60°), but its double, 17° from 120°, does not. The worst passing
// figures replace the axis's.
func (s *symSampler) wholeGroup(ax SymmetryAxis) bool {
	n := ax.Fold
	for k := 2; k <= n/2; k++ {
		_, mean, p95, ok := s.passes(ax.Rotation(2*math.Pi*float64(k)/float64(n)), false)
		if !ok {
			return false
		}
		ax.Mean, ax.P95 = math.Max(ax.Mean, mean), math.Max(ax.P95, p95)
	}
	return true
}

// screen searches a degenerate eigenspace for symmetry axes: directions
// in the plane perpendicular to c.dir at 1° steps, or over the half
// sphere, tested on the subset; local minima that nearly pass are tested
// in full.
func (s *symSampler) screen(centroid r3.Vec, c candidate) []SymmetryAxis {
	var dirs []r3.Vec
	if c.plane {
		u, w := planeBasis(c.dir)
		for k := 0; k < 180; k++ {
			sn, cs := math.Sincos(float64(k) * math.Pi / 180)
			dirs = append(dirs, r3.Add(r3.Scale(cs, u), r3.Scale(sn, w)))
		}
	} else {
		// Fibonacci points on the upper half sphere (z ≥ 0): even
		// coverage, one direction per antipodal pair.
		const n = 400
		golden := math.Pi * (3 - math.Sqrt(5))
		for k := 0; k < n; k++ {
			z := (float64(k) + 0.5) / n
			r := math.Sqrt(1 - z*z)
			sn, cs := math.Sincos(golden * float64(k))
			dirs = append(dirs, r3.Vec{X: r * cs, Y: r * sn, Z: z})
		}
	}
	var out []SymmetryAxis
	for fold := c.folds[1]; fold >= c.folds[0]; fold-- {
		score := make([]float64, len(dirs))
		for k, d := range dirs {
			ax := SymmetryAxis{Axis: d, Point: centroid}
			score[k], _ = s.stats(ax.Rotation(2*math.Pi/float64(fold)), s.sub)
		}
		var minima []int
		// Screening threshold: the sphere's grid is coarse (about 7°), so
		// a true axis may score some spacings off before refining; the
		// plane's 1° grid puts every true axis within 0.5°, a tenth of a
		// millimetre at the rim of a hand-sized part.
		limit := 3 * s.spacing
		if c.plane {
			limit = math.Max(10*s.tolMean, s.spacing/2)
		}
		for k, d := range dirs {
			if score[k] > limit {
				continue
			}
			// A local minimum among the neighbouring directions (within
			// 3° in the plane's 1° ring; within 12° on the sphere, whose
			// grid is about 7° apart).
			radius := 3.0
			if !c.plane {
				radius = 12
			}
			isMin := true
			for j, e := range dirs {
				if j != k && math.Abs(r3.Dot(d, e)) > math.Cos(radius*math.Pi/180) && (score[j] < score[k] || (score[j] == score[k] && j < k)) {
					isMin = false
					break
				}
			}
			if isMin {
				minima = append(minima, k)
			}
		}
		sort.SliceStable(minima, func(i, j int) bool { return score[minima[i]] < score[minima[j]] })
		// Refining costs an ICP run each: try the best few. In a plane
		// a true half-turn axis scores lowest (every other direction is
		// at least 0.5° off it); on the sphere a polyhedral group has at
		// most 31 axes (the icosahedron's 6 + 10 + 15).
		tries := 40
		if c.plane {
			tries = 4
		}
		minima = minima[:min(len(minima), tries)]
		for _, k := range minima {
			if c.plane && len(out) > 0 {
				break // the caller keeps one axis of the plane
			}
			if axisNearAny(out, dirs[k], 5) {
				continue
			}
			d, best := s.refineDir(centroid, dirs[k], c, fold, score[k])
			if best > 3*s.tolMean {
				continue
			}
			if ax, ok := s.testAxis(centroid, d, fold, fold, true); ok {
				if !c.plane {
					// On the sphere, also try higher folds on the axis.
					if hi, ok := s.testAxis(centroid, ax.Axis, fold, s.opt.MaxFold, false); ok {
						ax = hi
					}
				}
				out = addAxis(out, ax)
			}
		}
	}
	return out
}

func axisNearAny(list []SymmetryAxis, d r3.Vec, deg float64) bool {
	for _, a := range list {
		if math.Abs(r3.Dot(a.Axis, d)) > math.Cos(deg*math.Pi/180) {
			return true
		}
	}
	return false
}

// refineDir improves a screening direction by a pattern search on the
// subset's mean distance: try turning the axis by ±step along each
// tangent direction (only within the plane for a plane search), move
// when better, halve the step when not, from 4° down to 0.05°.
func (s *symSampler) refineDir(centroid, d r3.Vec, c candidate, fold int, score float64) (r3.Vec, float64) {
	eval := func(dir r3.Vec) float64 {
		m, _ := s.stats(SymmetryAxis{Axis: dir, Point: centroid}.Rotation(2*math.Pi/float64(fold)), s.sub)
		return m
	}
	for step := 4 * math.Pi / 180; step > 0.05*math.Pi/180; {
		var tangents []r3.Vec
		if c.plane {
			tangents = []r3.Vec{mesh.Normalize(r3.Cross(c.dir, d))}
		} else {
			u, w := planeBasis(d)
			tangents = []r3.Vec{u, w}
		}
		moved := false
		for _, tg := range tangents {
			for _, sg := range []float64{1, -1} {
				e := mesh.Normalize(r3.Add(r3.Scale(math.Cos(step), d), r3.Scale(sg*math.Sin(step), tg)))
				if v := eval(e); v < score {
					d, score, moved = e, v, true
				}
			}
		}
		if !moved {
			step /= 2
		}
	}
	return d, score
}

// colorMismatch returns the share of points of a whose colour differs
// from that of their nearest neighbour in b after the motion t.
func (s *symSampler) colorMismatch(t mesh.Pose) float64 {
	thr2 := s.opt.ColorThreshold * s.opt.ColorThreshold
	n := 0
	for i, p := range s.a.Points {
		j, _ := s.tree.Nearest(t.Apply(p))
		if colorDistance2(s.hsvA[i], s.hsvB[j], s.opt.Color) > thr2 {
			n++
		}
	}
	return float64(n) / float64(len(s.a.Points))
}

// colorFold returns the axis with the fold that colour allows.
func (s *symSampler) colorFold(g SymmetryAxis) (SymmetryAxis, bool) {
	ok := func(angle float64) (float64, bool) {
		f := s.colorMismatch(g.Rotation(angle)) - s.baseCol
		return f, f <= s.opt.ColorFraction
	}
	if g.Fold == 0 {
		worst := 0.0
		all := true
		for _, ang := range incommensurate {
			f, pass := ok(ang)
			worst = math.Max(worst, f)
			if !pass {
				all = false
				break
			}
		}
		if all {
			c := g
			c.ColorMismatch = worst
			return c, true
		}
		for n := s.opt.MaxFold; n >= 2; n-- {
			if f, pass := ok(2 * math.Pi / float64(n)); pass {
				c := g
				c.Fold, c.ColorMismatch = n, f
				return c, true
			}
		}
		return g, false
	}
	for n := g.Fold; n >= 2; n-- {
		if g.Fold%n != 0 {
			continue
		}
		if f, pass := ok(2 * math.Pi / float64(n)); pass {
			c := g
			c.Fold, c.ColorMismatch = n, f
			return c, true
		}
	}
	return g, false
}
