package features

import (
	"errors"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/num/quat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
	"github.com/scanfold/scanfold/mesh"
)

// MaxScenePoints bounds the scene cloud given to Vote (the k-d tree
// stores int32 indices; a 640×480 depth image has 307,200 pixels).
const MaxScenePoints = 1 << 24

// VoteOptions tunes Vote.
type VoteOptions struct {
	// ReferenceStep makes every ReferenceStep-th scene point (in the
	// cloud's order) a reference point; Drost et al. (2010) use every
	// fifth.
	// DEFAULT: 5
	ReferenceStep int
	// Spread also votes for the neighbouring quantisation bin of each
	// feature dimension and of α, the one on the side of the nearer bin
	// edge (Hinterstoisser, Lepetit, Rajkumar & Konolige 2016), so that
	// noise that pushes a value across an edge still finds its pair. A
	// (reference, key, α_s bin) combination votes once whatever number
	// of scene pairs produce it (their flag array).
	// DEFAULT: true
	Spread bool
	// PeaksPerReference is the number of accumulator peaks turned into
	// poses per reference point: the best cells, distinct, each with at
	// least PeakRatio of the best one's votes. Symmetric parts give
	// several equally good peaks.
	// DEFAULT: 3
	PeaksPerReference int
	// PeakRatio: see PeaksPerReference.
	// DEFAULT: 0.8
	PeakRatio float64
	// ClusterDistance and ClusterAngle are the pose-clustering
	// thresholds: a pose joins a cluster when its translation is within
	// ClusterDistance·diameter and its rotation within ClusterAngle
	// (radians) of the cluster's first (best) pose (Drost et al. 2010).
	// DEFAULT: 0.1, 24° (two α bins of the default quantisation)
	ClusterDistance float64
	ClusterAngle    float64
	// MaxHypotheses is the number of clusters returned, best first.
	// DEFAULT: 10
	MaxHypotheses int
	// Refine runs point-to-plane ICP (mesh.ICPPointToPlane) of the model
	// cloud against RefineScene (the scene when nil) from every returned
	// hypothesis: a coarse stage with the ICP options, then a fine one
	// with close pairs only, measured along the sum of the model's and
	// the scene's normals (the symmetric objective; see fineDistance in
	// vote.go), so the model's normals should be accurate.
	// DEFAULT: true
	Refine bool
	// RefineScene is the cloud ICP aligns to, with normals: typically
	// the scene at full resolution. nil means the voting scene.
	// DEFAULT: nil
	RefineScene *mesh.Cloud
	// RefineModel is the model cloud ICP moves, with normals, in the
	// model frame: typically a denser sample of the model surface than
	// the table's cloud, which resolves thin walls and small features
	// better. nil means the model's own cloud.
	// DEFAULT: nil
	RefineModel *mesh.Cloud
	// Verify counts the scene points each refined hypothesis's model
	// explains (Hypothesis.Support) and puts first the one that explains
	// clearly the most, when that is not the vote winner. Votes
	// count pairs the model can explain, not the scene it leaves
	// unexplained: an L-shaped part turned so that one flange lies on
	// the other's place collects nearly the votes of the right pose, but
	// leaves the scene's other flange unexplained. Checking hypotheses
	// against the scene after refinement is common practice in PPF
	// pipelines (e.g. Hinterstoisser et al. 2016 verify poses against
	// the scene; recalled from memory, not their exact test).
	// DEFAULT: true
	Verify bool
	// ICP tunes the refinement. Its MaxDistance and HuberDelta, when 0,
	// are derived from the model: 0.1·diameter (the clustering
	// tolerance: a hypothesis is that close) and the model spacing.
	// DEFAULT: mesh.DefaultICPOptions() with MaxDistance and HuberDelta
	// 0, StopRotation 1e-5 rad and StopTranslation 1e-6 m
	ICP mesh.ICPOptions
	// Workers bounds the goroutines; 0 means GOMAXPROCS. The result does
	// not depend on it.
	// DEFAULT: 0
	Workers int
}

// DefaultVoteOptions returns the documented defaults.
func DefaultVoteOptions() VoteOptions {
	icp := mesh.DefaultICPOptions()
	icp.MaxDistance, icp.HuberDelta = 0, 0
	// Stop when a step turns less than 1e-5 rad (0.4 µm at 40 mm from
	// the centre) and moves less than 1 µm: far below the 1 mm / 0.5°
	// the refinement is judged by, and reached in a few iterations even
	// where a symmetry leaves a direction free and steps shrink slowly.
	icp.StopRotation, icp.StopTranslation = 1e-5, 1e-6
	return VoteOptions{
		ReferenceStep:     5,
		Spread:            true,
		PeaksPerReference: 3,
		PeakRatio:         0.8,
		ClusterDistance:   0.1,
		ClusterAngle:      24 * math.Pi / 180,
		MaxHypotheses:     10,
		Refine:            true,
		Verify:            true,
		ICP:               icp,
	}
}

func (o VoteOptions) validate() error {
	switch {
	case o.ReferenceStep < 1:
		return fmt.Errorf("features: reference step %d, want ≥ 1", o.ReferenceStep)
	case o.PeaksPerReference < 1:
		return fmt.Errorf("features: %d peaks per reference, want ≥ 1", o.PeaksPerReference)
	case !(o.PeakRatio >= 0 && o.PeakRatio <= 1):
		return fmt.Errorf("features: peak ratio %v, want within [0, 1]", o.PeakRatio)
	case !(o.ClusterDistance > 0) || math.IsInf(o.ClusterDistance, 0):
		return fmt.Errorf("features: cluster distance %v, want > 0", o.ClusterDistance)
	case !(o.ClusterAngle > 0 && o.ClusterAngle <= math.Pi):
		return fmt.Errorf("features: cluster angle %v rad, want within (0, π]", o.ClusterAngle)
	case o.MaxHypotheses < 1:
		return fmt.Errorf("features: %d hypotheses, want ≥ 1", o.MaxHypotheses)
	}
	return nil
}

// Hypothesis is a pose of the model in the scene with its support.
type Hypothesis struct {
	// ModelToScene maps model points into the scene's frame; refined by
	// ICP when Refined.
	ModelToScene mesh.Pose
	// Votes is the sum of the votes of the cluster's poses.
	Votes float64
	// PeakVotes is the votes of the cluster's best single pose.
	PeakVotes float64
	// Members is the number of poses in the cluster.
	Members int
	// Voted is the pose from voting and clustering, before refinement.
	Voted mesh.Pose
	// Refined reports that ICP ran and converged or stopped at its
	// iteration limit without error; ICP holds its result.
	Refined bool
	ICP     mesh.ICPResult
	// Support is the number of points of the voting scene within half
	// a model spacing of the model cloud at ModelToScene (with
	// VoteOptions.Verify; 0 otherwise).
	Support int
}

// candidate is one accumulator peak turned into a pose.
type candidate struct {
	pose  mesh.Pose
	votes float64
	ref   int32 // scene reference point (its rank among references)
	rank  int32 // peak rank within the reference
}

// voteScratch is one worker's reusable memory.
type voteScratch struct {
	acc     []uint32 // model point × α bin
	flags   []uint64 // per distinct key: α_s bins already voted
	touched []int32  // distinct keys flagged for this reference
	nbrs    []int
	peaks   []int
	rowCell []int32 // per model point: its best accumulator cell
}

// Vote finds pose hypotheses of model in scene by the voting scheme of
// Drost et al. (2010) with the refinements of Hinterstoisser et al.
// (2016) described at VoteOptions. scene must have unit normals (as
// from mesh.DepthCloud) and should be sampled at about the model's
// spacing. For each reference point s_r, every scene point within the
// model diameter pairs with it; each pair's quantised feature looks up
// the model pairs with the same key, and each such model pair (m_r, φ_m)
// votes for (m_r, α = φ_s − φ_m) in an accumulator over model points ×
// α bins. Peaks give poses T_s→g⁻¹·Rx(α)·T_m→g, which are clustered;
// clusters are ranked by summed votes, and the best MaxHypotheses are
// returned (optionally refined by ICP). Equivalent poses of a
// symmetric part come out as separate hypotheses with similar votes.
//
// The result is identical for any number of workers. A scene with no
// reference point or no matching pair gives no hypotheses and no error.
func Vote(model *Model, scene *mesh.Cloud, opt VoteOptions) ([]Hypothesis, error) {
	if model == nil || model.q == nil {
		return nil, errors.New("features: Vote needs a model built by BuildTables or read by ReadTables")
	}
	if err := opt.validate(); err != nil {
		return nil, err
	}
	if err := scene.Validate(); err != nil {
		return nil, fmt.Errorf("features: scene: %v: %w", err, ErrInvalid)
	}
	if len(scene.Normals) != len(scene.Points) {
		return nil, fmt.Errorf("features: the scene has no normals (PPF needs one per point): %w", ErrInvalid)
	}
	if len(scene.Points) > MaxScenePoints {
		return nil, fmt.Errorf("features: the scene has %d points, more than %d: thin it to the model spacing first: %w", len(scene.Points), MaxScenePoints, ErrInvalid)
	}
	pts := scene.Points
	nrm := make([]r3.Vec, len(pts))
	for i, n := range scene.Normals {
		if !finiteVec(pts[i]) {
			return nil, fmt.Errorf("features: scene point %d is not finite (%v): %w", i, pts[i], ErrInvalid)
		}
		l := r3.Norm(n)
		if !(l >= 0.5 && l <= 2) {
			return nil, fmt.Errorf("features: scene normal %d has length %.3g, want a unit normal: %w", i, l, ErrInvalid)
		}
		nrm[i] = r3.Scale(1/l, n)
	}
	tree := mesh.NewKDTree(pts)
	nRef := (len(pts) + opt.ReferenceStep - 1) / opt.ReferenceStep
	peaks := opt.PeaksPerReference
	slots := make([]candidate, nRef*peaks)
	nm := len(model.cloud.Points)
	nb := model.q.angleBins
	workers := workerCount(opt.Workers)
	pool := make(chan *voteScratch, workers)
	const chunk = 16
	par.For((nRef+chunk-1)/chunk, workers, func(c int) {
		var s *voteScratch
		select {
		case s = <-pool:
		default:
			s = &voteScratch{acc: make([]uint32, nm*nb), flags: make([]uint64, len(model.keys)), rowCell: make([]int32, nm)}
		}
		for r := c * chunk; r < min(nRef, (c+1)*chunk); r++ {
			model.voteReference(s, tree, pts, nrm, r*opt.ReferenceStep, opt, slots[r*peaks:(r+1)*peaks], int32(r))
		}
		pool <- s
	})
	var cands []candidate
	for _, c := range slots {
		if c.votes > 0 {
			cands = append(cands, c)
		}
	}
	hyps := cluster(cands, opt.ClusterDistance*model.Diameter, opt.ClusterAngle, opt.MaxHypotheses)
	if opt.Refine && len(hyps) > 0 {
		if err := model.refine(hyps, scene, tree, opt); err != nil {
			return nil, err
		}
		if opt.Verify {
			model.verify(hyps, pts)
		}
	}
	return hyps, nil
}

// verifyMargin: a hypothesis overtakes the vote winner when it explains
// this many times as many scene points. Measured on clean renders
// (features recall test, 100 views a part): the L-bracket with its two
// flanges swapped leaves one flange's points unexplained (see Verify);
// the valve's turned poses explain within 3 % of the right one.
const verifyMargin = 1.1

// verify counts each hypothesis's Support: the scene points that, moved
// into the model frame, lie within half a model spacing of a model
// point (the voting scene is sampled at about the model spacing, so a
// scene point on the model's surface is nearer than that to the closest
// model sample; the fine refinement's pair distance). It then moves
// the refined hypothesis with the most support to the front when it
// explains more than verifyMargin times what the vote winner does.
func (m *Model) verify(hyps []Hypothesis, pts []r3.Vec) {
	tree := m.tree()
	lim := fineDistance * m.Spacing
	lim2 := lim * lim
	for i := range hyps {
		if !hyps[i].Refined {
			continue
		}
		inv := hyps[i].ModelToScene.Inv()
		// Only scene points within the model's reach can count.
		centre := hyps[i].ModelToScene.Apply(m.centre)
		reach := m.radius + lim
		n := 0
		for _, p := range pts {
			if r3.Norm2(r3.Sub(p, centre)) > reach*reach {
				continue
			}
			if _, d2 := tree.Nearest(inv.Apply(p)); d2 <= lim2 {
				n++
			}
		}
		hyps[i].Support = n
	}
	// Votes stay the first judge: on a boxy part, poses turned by a
	// quarter or half turn explain nearly as much of the scene as the
	// right one (the valve: 143 against 146 points), and noise would
	// pick among them. A hypothesis is moved to the front only when it
	// explains clearly more than the vote winner.
	best := -1
	for i := range hyps {
		if hyps[i].Refined && (best < 0 || hyps[i].Support > hyps[best].Support) {
			best = i
		}
	}
	if best > 0 && float64(hyps[best].Support) > verifyMargin*float64(hyps[0].Support) {
		h := hyps[best]
		copy(hyps[1:best+1], hyps[:best])
		hyps[0] = h
	}
}

// voteReference votes for scene reference point ri and writes its peaks
// into out.
func (m *Model) voteReference(s *voteScratch, tree *mesh.KDTree, pts, nrm []r3.Vec, ri int, opt VoteOptions, out []candidate, rank int32) {
	q := m.q
	sr, nr := pts[ri], nrm[ri]
	rs := AlignToX(nr)
	s.nbrs = tree.Radius(sr, m.Diameter, s.nbrs)
	nb := q.angleBins
	sub := q.alphaSub
	L := q.alphaLevels
	skip := m.Params.SkipPlanar
	acc := s.acc
	for _, j := range s.nbrs {
		if j == ri {
			continue
		}
		pj := pts[j]
		d := r3.Vec{X: pj.X - sr.X, Y: pj.Y - sr.Y, Z: pj.Z - sr.Z}
		d2 := d.X*d.X + d.Y*d.Y + d.Z*d.Z
		if d2 == 0 {
			continue
		}
		dist := math.Sqrt(d2)
		inv := 1 / dist
		nj := nrm[j]
		c1 := (nr.X*d.X + nr.Y*d.Y + nr.Z*d.Z) * inv
		c2 := (nj.X*d.X + nj.Y*d.Y + nj.Z*d.Z) * inv
		c3 := nr.X*nj.X + nr.Y*nj.Y + nr.Z*nj.Z
		b1, b2, b3 := q.feat.bin(c1), q.feat.bin(c2), q.feat.bin(c3)
		if skip && q.planar(b1, b2, b3) {
			continue
		}
		db, ndb := q.distBin(dist)
		phiS := q.phi(rs[1][0]*d.X+rs[1][1]*d.Y+rs[1][2]*d.Z, rs[2][0]*d.X+rs[2][1]*d.Y+rs[2][2]*d.Z)
		bit := uint64(1) << uint(phiS/sub)
		base := phiS + L // α level of a model pair with φ_m: (base − φ_m) mod L
		var ds, a1s, a2s, a3s [2]int
		ds[0], a1s[0], a2s[0], a3s[0] = db, b1, b2, b3
		nd, n1, n2, n3 := 1, 1, 1, 1
		if opt.Spread {
			if ndb >= 0 {
				ds[1], nd = ndb, 2
			}
			if x := q.feat.neighbour(c1, b1); x >= 0 {
				a1s[1], n1 = x, 2
			}
			if x := q.feat.neighbour(c2, b2); x >= 0 {
				a2s[1], n2 = x, 2
			}
			if x := q.feat.neighbour(c3, b3); x >= 0 {
				a3s[1], n3 = x, 2
			}
		}
		for i0 := 0; i0 < nd; i0++ {
			for i1 := 0; i1 < n1; i1++ {
				for i2 := 0; i2 < n2; i2++ {
					for i3 := 0; i3 < n3; i3++ {
						if skip && q.planar(a1s[i1], a2s[i2], a3s[i3]) {
							continue
						}
						k := q.key(ds[i0], a1s[i1], a2s[i2], a3s[i3])
						lo, hi, at := m.bucket(k)
						if at < 0 || s.flags[at]&bit != 0 {
							continue
						}
						if s.flags[at] == 0 {
							s.touched = append(s.touched, at)
						}
						s.flags[at] |= bit
						refs, phis := m.refs[lo:hi], m.phis[lo:hi]
						phis = phis[:len(refs)]
						if opt.Spread {
							for e, mr := range refs {
								x := base - int(phis[e])
								row := int(mr) * nb
								acc[row+int(q.alphaBin[x])]++
								acc[row+int(q.alphaNbr[x])]++
							}
						} else {
							for e, mr := range refs {
								acc[int(mr)*nb+int(q.alphaBin[base-int(phis[e])])]++
							}
						}
					}
				}
			}
		}
	}
	for _, at := range s.touched {
		s.flags[at] = 0
	}
	s.touched = s.touched[:0]
	m.peaks(s, sr, rs, opt, out, rank)
}

// peaks finds the best accumulator cells, one per model point (the
// best α of each; neighbouring α bins of one point are one peak spread
// by the voting), writes the poses of the best len(out) of them with at
// least PeakRatio of the top votes into out, and clears the
// accumulator.
func (m *Model) peaks(s *voteScratch, sr r3.Vec, rs mesh.Mat3, opt VoteOptions, out []candidate, rank int32) {
	acc := s.acc
	nb := m.q.angleBins
	// One pass: the best cell of each model point (first on ties).
	var best uint32
	for mr, row := 0, 0; row < len(acc); mr, row = mr+1, row+nb {
		cell, v := row, acc[row]
		for c, x := range acc[row+1 : row+nb] {
			if x > v {
				cell, v = row+1+c, x
			}
		}
		s.rowCell[mr] = int32(cell)
		best = max(best, v)
	}
	if best == 0 {
		return
	}
	floor := max(1, uint32(math.Ceil(opt.PeakRatio*float64(best))))
	// The best len(out) of those at or above the floor, in a short list
	// sorted by votes (ties: smaller model point first).
	s.peaks = s.peaks[:0]
	for _, c := range s.rowCell {
		cell := int(c)
		v := acc[cell]
		if v < floor {
			continue
		}
		pos := len(s.peaks)
		for pos > 0 && acc[s.peaks[pos-1]] < v {
			pos--
		}
		if pos >= len(out) {
			continue
		}
		s.peaks = slices.Insert(s.peaks, pos, cell)
		if len(s.peaks) > len(out) {
			s.peaks = s.peaks[:len(out)]
		}
	}
	for i, cell := range s.peaks {
		mr, ab := cell/nb, cell%nb
		out[i] = candidate{
			pose:  poseFromPair(m.cloud.Points[mr], m.rot[mr], sr, rs, m.q.alphaAngle(ab)),
			votes: float64(acc[cell]),
			ref:   rank,
			rank:  int32(i),
		}
	}
	clear(acc)
}

// cluster groups candidate poses greedily, best first: each joins the
// first cluster whose first pose is within dist (translation) and angle
// (rotation), else starts a new one. A cluster's votes are the sum of
// its members'; its pose is the vote-weighted mean of its members'
// translations and of their rotations as quaternions (signs aligned to
// the first member's, then normalised — the usual approximation of the
// rotation mean for nearby rotations). It returns the best max clusters
// by votes.
func cluster(cands []candidate, dist, angle float64, maxOut int) []Hypothesis {
	slices.SortStableFunc(cands, func(a, b candidate) int {
		switch {
		case a.votes > b.votes:
			return -1
		case a.votes < b.votes:
			return 1
		case a.ref != b.ref:
			return int(a.ref - b.ref)
		}
		return int(a.rank - b.rank)
	})
	type acc struct {
		first  mesh.Pose
		q0     quat.Number
		q      quat.Number
		t      r3.Vec
		votes  float64
		peak   float64
		member int
	}
	var cl []acc
	d2 := dist * dist
	// Two rotations are within angle θ when the trace of RaᵀRb, which
	// is 1 + 2·cos of their relative angle, is at least 1 + 2·cos θ: no
	// trigonometry per comparison.
	minTrace := 1 + 2*math.Cos(angle)
	for _, c := range cands {
		found := -1
		for k := range cl {
			f := &cl[k].first
			if r3.Norm2(r3.Sub(f.T, c.pose.T)) > d2 {
				continue
			}
			var tr float64
			for i := 0; i < 3; i++ {
				for j := 0; j < 3; j++ {
					tr += f.R[i][j] * c.pose.R[i][j]
				}
			}
			if tr >= minTrace {
				found = k
				break
			}
		}
		qc := c.pose.Quat()
		if found < 0 {
			cl = append(cl, acc{first: c.pose, q0: qc})
			found = len(cl) - 1
		}
		a := &cl[found]
		if quatDot(a.q0, qc) < 0 {
			qc = quat.Scale(-1, qc)
		}
		a.q = quat.Add(a.q, quat.Scale(c.votes, qc))
		a.t = r3.Add(a.t, r3.Scale(c.votes, c.pose.T))
		a.votes += c.votes
		a.peak = math.Max(a.peak, c.votes)
		a.member++
	}
	order := make([]int, len(cl))
	for i := range order {
		order[i] = i
	}
	slices.SortStableFunc(order, func(a, b int) int {
		switch {
		case cl[a].votes > cl[b].votes:
			return -1
		case cl[a].votes < cl[b].votes:
			return 1
		}
		return a - b
	})
	out := make([]Hypothesis, 0, min(maxOut, len(cl)))
	for _, k := range order[:min(maxOut, len(order))] {
		a := cl[k]
		p := mesh.PoseFromQuat(a.q, r3.Scale(1/a.votes, a.t))
		out = append(out, Hypothesis{ModelToScene: p, Voted: p, Votes: a.votes, PeakVotes: a.peak, Members: a.member})
	}
	return out
}

func quatDot(a, b quat.Number) float64 {
	return a.Real*b.Real + a.Imag*b.Imag + a.Jmag*b.Jmag + a.Kmag*b.Kmag
}

// refine runs ICP from every hypothesis.
func (m *Model) refine(hyps []Hypothesis, scene *mesh.Cloud, tree *mesh.KDTree, opt VoteOptions) error {
	dst := scene
	near := tree
	if opt.RefineScene != nil {
		dst = opt.RefineScene
		if len(dst.Normals) != len(dst.Points) {
			return fmt.Errorf("features: the refinement scene has no normals: %w", ErrInvalid)
		}
		near = mesh.NewKDTree(dst.Points)
	}
	src := m.cloud
	if opt.RefineModel != nil {
		src = opt.RefineModel
		if len(src.Normals) != len(src.Points) {
			return fmt.Errorf("features: the refinement model has no normals: %w", ErrInvalid)
		}
	}
	icp := opt.ICP
	if icp.Damping == 0 {
		icp.Damping = icpDamping
	}
	if icp.MaxDistance == 0 {
		icp.MaxDistance = 0.1 * m.Diameter
	}
	if icp.HuberDelta == 0 {
		icp.HuberDelta = m.Spacing
	}
	for i := range hyps {
		res, err := mesh.ICPPointToPlane(src, dst, near, hyps[i].ModelToScene, icp)
		if err == nil {
			fine := icp
			fine.MaxDistance = fineDistance * m.Spacing
			fine.MaxNormalAngle = fineNormalAngle
			fine.MaxIterations = min(fine.MaxIterations, fineIterations)
			fine.Symmetric = true
			if r2, err2 := mesh.ICPPointToPlane(src, dst, near, res.Pose, fine); err2 == nil {
				res = r2
			}
		}
		if err != nil {
			if errors.Is(err, mesh.ErrDegenerate) {
				continue // too few pairs: the hypothesis stays unrefined
			}
			return fmt.Errorf("features: refining hypothesis %d: %w", i, err)
		}
		hyps[i].ModelToScene = res.Pose
		hyps[i].Refined = true
		hyps[i].ICP = res
	}
	return nil
}

// The fine refinement stage: after ICP from the voted pose with the
// coarse options has converged, a second run keeps only pairs within
// fineDistance model spacings, and measures each pair along the sum of
// the model's and the scene's normals (mesh.ICPOptions.Symmetric; the
// symmetric objective of Rusinkiewicz 2019). On a scene at a fraction
// of the model spacing, a point on the surface is far closer than half
// a spacing to its nearest scene point, so the distance limit leaves
// the true pairs. On noise-free renders of a test block this stage
// brought the median refined error from 0.18 mm / 0.37° to 0.01 mm /
// 0.03° (recall_test.go).
//
// The residual is not measured along the scene normal alone: a depth
// image's normals come from a window of pixels (mesh.DepthCloud: 5×5,
// about 5 mm at 0.5 m), which straddles every crease and the whole of
// a thin face — the 4 mm edges of the bracket's flanges, its hole walls,
// the rims. There the scene normals bend by up to half the crease angle,
// and turn the pairs' in-plane offsets into residuals of 0.1–0.7 mm, all
// of one sign. Yet those pairs are what pins a view showing mostly one
// flat face: the face leaves the motion within it to its outline and
// holes. Along the scene normals, 3–10 % of the pairs, all at such
// edges, carried 99 % of the squared residual at the true pose of the
// bracket's failing views, and the minimum lay 1.0–1.4° and 0.4–0.7 mm
// away from it (the fine stage started from the truth ended there too;
// with the renderer's exact normals instead, it ended within 0.27° and
// 0.14 mm). The model's normals are not blurred that way, and the
// symmetric residual, exact for points of a common sphere, halves the
// tilt of a blurred one. fineNormalAngle is then the coarse stage's
// 45°, the largest bend at a right-angled crease: a tighter limit (20°
// before) drops exactly the edge pairs that carry the information, and
// leaves the less bent, still biased ones.
//
// The fine stage starts from a converged pose, so a few iterations
// suffice; the cap matters for symmetric parts, where a faceted surface
// leaves a slow drift along the free rotation that never meets the stop
// thresholds.
const (
	fineDistance    = 0.5
	fineNormalAngle = 45 * math.Pi / 180
	fineIterations  = 10
)

// icpDamping is the Tikhonov damping of the refinement's normal
// equations relative to the sum of pair weights, applied after the
// problem is centred on the source's centroid and scaled by its RMS
// radius so that the rotation and translation blocks of JᵀWJ are both
// of order W. A single view often leaves a direction unconstrained (two
// visible planes leave the translation along their common line free);
// damping keeps the pose still along it instead of failing, and since
// the damped step vanishes exactly where the gradient does, it does not
// move the converged pose. 1e-3·W slows the constrained directions by
// about 0.3% per step.
const icpDamping = 1e-3
