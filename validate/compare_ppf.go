package validate

import (
	"context"
	"fmt"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
)

// ppfHypotheses is the number of PPF poses Compare adds to its coarse
// candidates: the clusters with the most votes. Ten covers the
// symmetric equivalents of a part with up to ten-fold symmetry, each as
// good as the other for a comparison.
const ppfHypotheses = 10

// ppfCandidates returns coarse poses of the scan (scaled by k) in the
// reference's frame found by point-pair-feature voting (Drost et al.
// 2010, CVPR, DOI 10.1109/CVPR.2010.5540108; package features): the
// reference is sampled at the default 5 % of its diameter and its
// tables built (features.BuildTables); the scan's alignment points,
// scaled by k and thinned to the same spacing, are the scene; each
// hypothesis maps the reference into the scan, so its inverse is a
// candidate. A scan with too few points for a vote gives no candidates
// and no error; so does a reference whose tables cannot be built from
// a sample of it (a degenerate sample), the principal axes then being
// the only candidates.
func (a *aligner) ppfCandidates(ctx context.Context, k float64) ([]mesh.Pose, error) {
	so := mesh.DefaultSampleOptions()
	so.Seed = a.opt.Seed
	so.Normals = mesh.NormalsFace
	refCloud, spacing, err := mesh.Sample(a.refMesh, so)
	if err != nil {
		return nil, fmt.Errorf("validate: sampling the reference for PPF: %w", err)
	}
	to := features.DefaultTableOptions()
	to.Spacing = spacing
	model, err := features.BuildTables(ctx, refCloud, to)
	if err != nil {
		if ctx.Err() != nil {
			return nil, ctx.Err()
		}
		return nil, nil
	}
	pts := make([]r3.Vec, len(a.pts))
	for i, p := range a.pts {
		pts[i] = r3.Scale(k, p)
	}
	keep, err := mesh.Thin(pts, spacing)
	if err != nil {
		return nil, fmt.Errorf("validate: thinning the scan for PPF: %w", err)
	}
	if len(keep) < 10 {
		return nil, nil
	}
	scene := &mesh.Cloud{Points: make([]r3.Vec, len(keep)), Normals: make([]r3.Vec, len(keep))}
	for i, j := range keep {
		scene.Points[i], scene.Normals[i] = pts[j], a.nrm[j]
	}
	vo := features.DefaultVoteOptions()
	vo.Refine = false // the caller refines the best candidates by its own ICP
	vo.MaxHypotheses = ppfHypotheses
	hyps, err := features.Vote(model, scene, vo)
	if err != nil {
		return nil, fmt.Errorf("validate: PPF voting in the scan: %w", err)
	}
	out := make([]mesh.Pose, len(hyps))
	for i, h := range hyps {
		out[i] = h.ModelToScene.Inv()
	}
	return out, ctx.Err()
}
