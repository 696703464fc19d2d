package validate

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// CorrectFraction is the share of the model diameter below which an
// ADD or ADD-S error counts as a correct pose (Hinterstoisser et al.
// 2012, ACCV, DOI 10.1007/978-3-642-37331-2_42: 10 % of the diameter).
const CorrectFraction = 0.1

// MaxSymmetryPoses bounds the symmetry transforms an ErrorModel keeps:
// MSSD and MSPD cost one pass over the model per transform.
const MaxSymmetryPoses = 4096

// ErrorModel holds what the pose errors need about one part: its model
// points (part frame, metres), their diameter, a k-d tree over them for
// ADD-S, and the part's symmetry transforms for MSSD and MSPD. Build it
// once with NewErrorModel and use it for every hypothesis; it is
// read-only afterwards and safe for concurrent use.
type ErrorModel struct {
	points   []r3.Vec
	tree     *mesh.KDTree
	diameter float64
	syms     []mesh.Pose
}

// NewErrorModel returns the error model of the points (typically the
// part's evenly sampled cloud or its mesh vertices) with the symmetry
// transforms syms (part frame to part frame, as SymmetryPoses or
// parts.Symmetry.Rotations return them). The identity is added when syms
// lacks it, so a nil syms means "no symmetry". Points with a NaN or
// infinite coordinate are an error; so is an empty point set, and more
// than MaxSymmetryPoses transforms.
func NewErrorModel(points []r3.Vec, syms []mesh.Pose) (*ErrorModel, error) {
	if len(points) == 0 {
		return nil, fmt.Errorf("validate: error model without points: %w", mesh.ErrDegenerate)
	}
	for i, p := range points {
		if !finite3(p) {
			return nil, fmt.Errorf("validate: error model point %d is %v", i, p)
		}
	}
	if len(syms) > MaxSymmetryPoses {
		return nil, fmt.Errorf("validate: %d symmetry transforms, at most %d", len(syms), MaxSymmetryPoses)
	}
	m := &ErrorModel{points: append([]r3.Vec(nil), points...)}
	m.tree = mesh.NewKDTree(m.points)
	m.diameter = mesh.CloudDiameter(m.points)
	hasIdentity := false
	for _, s := range syms {
		if isIdentity(s, 1e-9) {
			hasIdentity = true
		}
	}
	if !hasIdentity {
		m.syms = append(m.syms, mesh.Identity())
	}
	m.syms = append(m.syms, syms...)
	return m, nil
}

// Diameter returns the largest distance between two model points.
func (m *ErrorModel) Diameter() float64 { return m.diameter }

// Len returns the number of model points.
func (m *ErrorModel) Len() int { return len(m.points) }

// Symmetries returns the symmetry transforms used by MSSD and MSPD, the
// identity included. The slice must not be changed.
func (m *ErrorModel) Symmetries() []mesh.Pose { return m.syms }

// ADD returns the average distance of model points (Hinterstoisser et
// al. 2012, ACCV, DOI 10.1007/978-3-642-37331-2_42):
//
//	ADD = mean over x of ‖(R·x + t) − (R̂·x + t̂)‖
//
// with truth = (R, t) and est = (R̂, t̂), both model-to-camera (or any
// common frame). Metres.
func (m *ErrorModel) ADD(truth, est mesh.Pose) float64 {
	var sum float64
	for _, x := range m.points {
		sum += r3.Norm(r3.Sub(truth.Apply(x), est.Apply(x)))
	}
	return sum / float64(len(m.points))
}

// ADDS returns the average distance for indistinguishable views
// (Hinterstoisser et al. 2012, as ADD):
//
//	ADD-S = mean over x₁ of min over x₂ of ‖(R·x₁ + t) − (R̂·x₂ + t̂)‖
//
// The minimum is found in the model frame with the k-d tree: the
// distance is unchanged by mapping both points back through est, so
// the query point is est⁻¹·(truth·x₁) and no tree is rebuilt per pose.
// Metres.
func (m *ErrorModel) ADDS(truth, est mesh.Pose) float64 {
	back := est.Inv().Mul(truth)
	var sum float64
	for _, x := range m.points {
		_, d2 := m.tree.Nearest(back.Apply(x))
		sum += math.Sqrt(d2)
	}
	return sum / float64(len(m.points))
}

// MSSD returns the maximum symmetry-aware surface distance of the BOP
// benchmark (Hodaň et al. 2020, "BOP challenge 2020 on 6D object
// localization", ECCV workshops, DOI 10.1007/978-3-030-66096-3_39):
//
//	MSSD = min over S of max over x of ‖P̂·x − P·S·x‖
//
// with P = truth, P̂ = est and S over the model's symmetry transforms.
// Metres.
func (m *ErrorModel) MSSD(truth, est mesh.Pose) float64 {
	best := math.Inf(1)
	for _, s := range m.syms {
		ps := truth.Mul(s)
		var worst2 float64
		for _, x := range m.points {
			d2 := r3.Norm2(r3.Sub(est.Apply(x), ps.Apply(x)))
			if d2 > worst2 {
				worst2 = d2
				if worst2 >= best*best {
					break // this S cannot win
				}
			}
		}
		best = math.Min(best, math.Sqrt(worst2))
	}
	return best
}

// MSPD returns the maximum symmetry-aware projection distance of the
// BOP benchmark (Hodaň et al. 2020, as MSSD), in pixels:
//
//	MSPD = min over S of max over x of ‖proj(P̂·x) − proj(P·S·x)‖
//
// with both poses model-to-camera and proj the pinhole projection of
// intr. Points that either pose puts at or behind the camera (z ≤ 0)
// make the error +Inf: no projection exists.
func (m *ErrorModel) MSPD(truth, est mesh.Pose, intr mesh.Intrinsics) float64 {
	best := math.Inf(1)
	for _, s := range m.syms {
		ps := truth.Mul(s)
		var worst2 float64
		for _, x := range m.points {
			a, b := est.Apply(x), ps.Apply(x)
			if !(a.Z > 0 && b.Z > 0) {
				worst2 = math.Inf(1)
				break
			}
			ua, va := intr.Project(a)
			ub, vb := intr.Project(b)
			d2 := (ua-ub)*(ua-ub) + (va-vb)*(va-vb)
			if d2 > worst2 {
				worst2 = d2
				if worst2 >= best*best {
					break
				}
			}
		}
		best = math.Min(best, math.Sqrt(worst2))
	}
	return best
}

// Correct reports whether est is a correct pose under the criterion of
// Hinterstoisser et al. (2012): ADD < 0.1 × diameter, or ADD-S for a
// symmetric part (symmetric = true).
func (m *ErrorModel) Correct(truth, est mesh.Pose, symmetric bool) bool {
	limit := CorrectFraction * m.diameter
	if symmetric {
		return m.ADDS(truth, est) < limit
	}
	return m.ADD(truth, est) < limit
}

// Recall returns the share of errors strictly below threshold: the
// recall of a set of pose estimates at one error threshold. A NaN error
// counts as a miss. Empty input gives 0.
func Recall(errs []float64, threshold float64) float64 {
	if len(errs) == 0 {
		return 0
	}
	n := 0
	for _, e := range errs {
		if e < threshold {
			n++
		}
	}
	return float64(n) / float64(len(errs))
}

// AverageRecall returns the mean of Recall over the thresholds: the
// per-error average recall of the BOP benchmark (Hodaň et al. 2020).
// No thresholds give 0.
func AverageRecall(errs []float64, thresholds []float64) float64 {
	if len(thresholds) == 0 {
		return 0
	}
	var s float64
	for _, t := range thresholds {
		s += Recall(errs, t)
	}
	return s / float64(len(thresholds))
}

// MSSDThresholds returns the BOP thresholds for MSSD: 0.05, 0.10, …,
// 0.50 times the diameter (Hodaň et al. 2020).
func MSSDThresholds(diameter float64) []float64 {
	out := make([]float64, 10)
	for i := range out {
		out[i] = 0.05 * float64(i+1) * diameter
	}
	return out
}

// MSPDThresholds returns the BOP thresholds for MSPD in pixels: 5r,
// 10r, …, 50r with r = width/640 (Hodaň et al. 2020).
func MSPDThresholds(width int) []float64 {
	r := float64(width) / 640
	out := make([]float64, 10)
	for i := range out {
		out[i] = 5 * float64(i+1) * r
	}
	return out
}

// ContinuousSymmetrySteps returns the number of discrete rotations BOP
// uses for a continuous rotational symmetry: so many that the model
// point farthest from the axis, at distance radius, travels at most
// maxStep × diameter between consecutive rotations. The BOP toolkit
// uses maxStep = 0.01 (from memory). At least 1; at most
// MaxSymmetryPoses.
func ContinuousSymmetrySteps(radius, diameter, maxStep float64) int {
	if !(radius > 0) || !(diameter > 0) || !(maxStep > 0) {
		return 1
	}
	// The arc between consecutive rotations by 2π/n is 2π·radius/n.
	n := math.Ceil(2 * math.Pi * radius / (maxStep * diameter))
	if n > MaxSymmetryPoses || math.IsNaN(n) {
		return MaxSymmetryPoses
	}
	return max(int(n), 1)
}

// errGroupTooLarge is returned when the generated symmetry group would
// exceed MaxSymmetryPoses.
var errGroupTooLarge = errors.New("validate: symmetry group exceeds MaxSymmetryPoses")

// SymmetryPoses returns the group of rigid transforms generated by the
// given generators (each a proper rotation about an axis through some
// point, as part-frame poses), the identity first, by closing the set
// under composition. Two transforms are the same when their rotations
// differ by less than angleTol radians and their translations by less
// than distTol metres. It returns an error when the group grows beyond
// MaxSymmetryPoses (a continuous symmetry must be discretised first).
func SymmetryPoses(generators []mesh.Pose, angleTol, distTol float64) ([]mesh.Pose, error) {
	group := []mesh.Pose{mesh.Identity()}
	// Two rotations θ apart differ by ‖R₁ − R₂‖_F = 2√2·sin(θ/2), a
	// cheaper test than the angle itself.
	rtol := 2 * math.Sqrt2 * math.Sin(math.Min(angleTol, math.Pi)/2)
	has := func(p mesh.Pose) bool {
		for _, g := range group {
			if r3.Norm(r3.Sub(g.T, p.T)) < distTol && frobenius(g.R, p.R) < rtol {
				return true
			}
		}
		return false
	}
	// Breadth-first closure: multiply every new element by every
	// generator until nothing new appears.
	for i := 0; i < len(group); i++ {
		for _, gen := range generators {
			p := gen.Mul(group[i]).Orthonormalize()
			if !has(p) {
				if len(group) >= MaxSymmetryPoses {
					return nil, errGroupTooLarge
				}
				group = append(group, p)
			}
		}
	}
	return group, nil
}

func frobenius(a, b mesh.Mat3) float64 {
	var s float64
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			d := a[i][j] - b[i][j]
			s += d * d
		}
	}
	return math.Sqrt(s)
}

func isIdentity(p mesh.Pose, tol float64) bool {
	id := mesh.Identity3()
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			if math.Abs(p.R[i][j]-id[i][j]) > tol {
				return false
			}
		}
	}
	return r3.Norm(p.T) <= tol
}

func finite3(p r3.Vec) bool {
	return !math.IsNaN(p.X+p.Y+p.Z) && !math.IsInf(p.X+p.Y+p.Z, 0)
}
