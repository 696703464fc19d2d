package validate

import (
	"context"
	"fmt"
	"hash/fnv"
	"math"
	"sync"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
)

// NamedModel is another part the checked part could be confused with:
// a catalog part or a demo part.
type NamedModel struct {
	// Name names the part.
	Name string
	// Mesh is its surface in its part frame, wound outward.
	Mesh *mesh.Mesh
	// Tables are its PPF tables; nil builds them from Mesh (sampled at
	// 5 % of its diameter with the default table options).
	Tables *features.Model
	// Threshold is its point-score acceptance threshold when known (a
	// catalog keeps it with the part); 0 means unknown (see
	// VerdictRules.ConfuserRatio).
	Threshold float64
}

// DemoConfusers returns the demo parts (package parts) other than the
// one named exclude, meshed at spacing (metres; 0: 1 mm), as the
// confusers of a check when no catalog is at hand.
func DemoConfusers(spacing float64, exclude string) ([]NamedModel, error) {
	if spacing == 0 {
		spacing = 0.001
	}
	var out []NamedModel
	for _, p := range parts.All() {
		if p.Name == exclude {
			continue
		}
		m, err := p.Mesh(spacing)
		if err != nil {
			return nil, fmt.Errorf("validate: demo part %s: %w", p.Name, err)
		}
		out = append(out, NamedModel{Name: p.Name, Mesh: m})
	}
	return out, nil
}

// ConfusionSide is one direction of a confusion test: the cell looking
// for one part in scenes that hold only the other.
type ConfusionSide struct {
	// Scenes is the number of scenes, Accepted those in which the best
	// hypothesis of the looked-for part scored at or above Threshold,
	// Share their ratio; Best is the highest such score.
	Scenes   int     `json:"scenes"`
	Accepted int     `json:"accepted"`
	Share    float64 `json:"share"`
	Best     float64 `json:"best_score"`
	// Threshold is the looked-for part's acceptance threshold and
	// ThresholdFrom where it came from: "calibrated" (this check),
	// "catalog" (NamedModel.Threshold) or "estimated"
	// (VerdictRules.ConfuserRatio times its median score at its true
	// pose in its own clean scenes).
	Threshold     float64 `json:"threshold"`
	ThresholdFrom string  `json:"threshold_from"`
}

// PartConfusion is the confusion test of the checked part with another
// part.
type PartConfusion struct {
	// Name is the other part's.
	Name string `json:"name"`
	// Forward: the cell looking for the checked part in scenes of the
	// other; Reverse: looking for the other in scenes of the checked
	// part.
	Forward ConfusionSide `json:"forward"`
	Reverse ConfusionSide `json:"reverse"`
	// OwnScore is the other part's median point score at its true pose
	// in its own scenes.
	OwnScore float64 `json:"own_score"`
}

// confuserModel is a confuser ready to vote and score.
type confuserModel struct {
	named  NamedModel
	pc     *partCheck
	stable []StablePose
}

// confusers votes the checked part's tables against clean renders of
// every other part, and theirs against clean renders of the checked
// part, each scored with the point scorer (the checked part's
// calibrated weights; the others' default weights).
func (pc *partCheck) confusers(ctx context.Context, others []NamedModel, res *CheckResult, opt CheckOptions, workers int,
	progress func(string, int, int)) ([]PartConfusion, error) {
	k := opt.ConfuserViews
	cms := make([]*confuserModel, len(others))
	err := forEach(ctx, len(others), workers, func(i int) error {
		o := others[i]
		if o.Mesh == nil {
			return fmt.Errorf("validate: confuser %q has no mesh", o.Name)
		}
		cm, err := newConfuserModel(o, opt)
		if err != nil {
			return fmt.Errorf("validate: confuser %q: %w", o.Name, err)
		}
		cms[i] = cm
		return nil
	})
	if err != nil {
		return nil, err
	}
	// Clean scenes: no clutter, no occluder.
	sopt := opt.Scene
	sopt.MinOcclusion, sopt.MaxOcclusion = 0, 0
	sopt.MinClutter, sopt.MaxClutter = 0, 0

	// Jobs: the checked part's k scenes (each voted by every other
	// part's tables), then each other part's k scenes (voted by the
	// checked part's tables).
	own := make([][]sideScore, len(cms))     // [confuser][scene]: confuser's best in the part's scenes
	foreign := make([][]sideScore, len(cms)) // [confuser][scene]: the part's best in the confuser's scenes
	ownTruth := make([][]float64, len(cms))  // the confuser's score at its truth in its scenes
	partTruth := make([]float64, k)          // the part's score at its truth in its scenes
	for i := range cms {
		own[i] = make([]sideScore, k)
		foreign[i] = make([]sideScore, k)
		ownTruth[i] = make([]float64, k)
	}
	total := k + len(cms)*k
	var mu sync.Mutex
	done := 0
	progress("confusers", 0, total)
	err = forEach(ctx, total, workers, func(j int) error {
		if j < k {
			sc, obs, err := confuserScene(pc.scene, res.Stable.Poses, sopt, opt.Seed^0xc0f05e, j)
			if err != nil {
				return err
			}
			partTruth[j] = PointScore(pc.score, sc.ModelToCam, obs, pc.calibrated).Score
			for i, cm := range cms {
				if own[i][j], err = cm.pc.bestIn(sc, obs); err != nil {
					return err
				}
			}
		} else {
			i, s := (j-k)/k, (j-k)%k
			cm := cms[i]
			sc, obs, err := confuserScene(cm.named.Mesh, cm.stable, sopt, opt.Seed^nameSeed(cm.named.Name), s)
			if err != nil {
				return err
			}
			ownTruth[i][s] = PointScore(cm.pc.score, sc.ModelToCam, obs, cm.pc.calibrated).Score
			if foreign[i][s], err = pc.bestIn(sc, obs); err != nil {
				return err
			}
		}
		mu.Lock()
		done++
		progress("confusers", done, total)
		mu.Unlock()
		return nil
	})
	if err != nil {
		return nil, err
	}
	partThreshold, partFrom := 0.0, "calibrated"
	if c := res.Point.Calibration; c != nil {
		partThreshold = c.Threshold
	} else {
		partThreshold, partFrom = opt.Rules.ConfuserRatio*median(partTruth), "estimated"
	}
	out := make([]PartConfusion, len(cms))
	for i, cm := range cms {
		pcf := PartConfusion{Name: cm.named.Name, OwnScore: median(ownTruth[i])}
		th, from := cm.named.Threshold, "catalog"
		if !(th > 0) {
			th, from = opt.Rules.ConfuserRatio*pcf.OwnScore, "estimated"
		}
		side := func(list []sideScore, th float64, from string) ConfusionSide {
			cs := ConfusionSide{Scenes: len(list), Threshold: th, ThresholdFrom: from, Best: math.Inf(-1)}
			for _, s := range list {
				if !s.found {
					continue
				}
				cs.Best = math.Max(cs.Best, s.best)
				if s.best >= th {
					cs.Accepted++
				}
			}
			if math.IsInf(cs.Best, -1) {
				cs.Best = 0
			}
			cs.Share = float64(cs.Accepted) / float64(max(cs.Scenes, 1))
			return cs
		}
		pcf.Forward = side(foreign[i], partThreshold, partFrom)
		pcf.Reverse = side(own[i], th, from)
		out[i] = pcf
	}
	return out, nil
}

// newConfuserModel prepares another part: tables (built when missing),
// score and refinement samples, resting poses.
func newConfuserModel(o NamedModel, opt CheckOptions) (*confuserModel, error) {
	if err := o.Mesh.Validate(); err != nil {
		return nil, err
	}
	tables := o.Tables
	if tables == nil {
		so := mesh.DefaultSampleOptions()
		so.Seed = opt.Seed
		if o.Mesh.Normals == nil {
			so.Normals = mesh.NormalsFace
		}
		c, spacing, err := mesh.Sample(o.Mesh, so)
		if err != nil {
			return nil, err
		}
		to := features.DefaultTableOptions()
		to.Spacing = spacing
		to.Workers = 1
		if tables, err = features.BuildTables(context.Background(), c, to); err != nil {
			return nil, err
		}
	}
	st, err := StablePoses(o.Mesh, opt.Stable)
	if err != nil {
		return nil, err
	}
	pc, err := newPartCheck(o.Mesh, tables, nil, false, opt)
	if err != nil {
		return nil, err
	}
	return &confuserModel{named: o, pc: pc, stable: st.Poses}, nil
}

// sideScore is the best score a part's hypotheses reach in one
// confuser scene, and whether there were any.
type sideScore struct {
	best  float64
	found bool
}

// confuserScene renders scene idx of a confuser test: m alone on the
// table in one of its resting poses, with the scene options and seed
// given, and its observation.
func confuserScene(m *mesh.Mesh, poses []StablePose, sopt SceneOptions, seed uint64, idx int) (*Scene, *Observation, error) {
	sopt.Seed = seed
	g, err := NewSceneGenerator(m, poses, nil, sopt)
	if err != nil {
		return nil, nil, err
	}
	sc, err := g.Scene(idx)
	if err != nil {
		return nil, nil, err
	}
	obs, err := ObservationFromFrame(sc.Frame)
	if err != nil {
		return nil, nil, err
	}
	return sc, obs, nil
}

// bestIn votes for pc's part in sc and returns the best point score of
// its hypotheses there (found false when there were none).
func (pc *partCheck) bestIn(sc *Scene, obs *Observation) (sideScore, error) {
	up, d := tableInCamera(sc)
	hyps, err := pc.voteScene(sc.Frame.Depth, sc.Frame.Intr, up, d)
	if err != nil {
		return sideScore{}, err
	}
	b := sideScore{best: math.Inf(-1)}
	for _, h := range hyps {
		if s := PointScore(pc.score, h.ModelToScene, obs, pc.calibrated).Score; s > b.best {
			b = sideScore{s, true}
		}
	}
	return b, nil
}

// tableInCamera returns the table plane of a scene in its camera
// frame as (up, d) with up·x + d = 0 on the table (world z = 0, up +z).
func tableInCamera(sc *Scene) (r3.Vec, float64) {
	worldToCam := sc.CamToWorld.Inv()
	up := worldToCam.Rotate(r3.Vec{Z: 1})
	return up, -r3.Dot(up, worldToCam.T)
}

// nameSeed hashes a part name into a seed (FNV-1a), so each confuser's
// scenes are its own whatever the order of the list.
func nameSeed(name string) uint64 {
	h := fnv.New64a()
	h.Write([]byte(name))
	return h.Sum64()
}
