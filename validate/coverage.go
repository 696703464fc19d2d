package validate

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// MaxCoverageFrames bounds the frames ComputeCoverage takes.
const MaxCoverageFrames = 100_000

// CoverageOptions tunes ComputeCoverage.
type CoverageOptions struct {
	// MinVisibleFraction: a face that projects onto at least
	// MinProjectedPixels pixels counts as seen in a frame when the
	// pixels that show it (and have valid depth, when depth images are
	// given) cover at least this share of its projected area. Half keeps
	// faces cut by an occluding edge or the image border from counting
	// on a sliver, and lets faces split by rasterisation at shared edges
	// still count.
	// DEFAULT: 0.5
	MinVisibleFraction float64
	// MinProjectedPixels is the projected area (square pixels) below
	// which a face is too small for a pixel count: it counts as seen
	// when the pixel under its centroid shows the surface at the
	// centroid's depth (within the depth change across 1.5 pixels at the
	// face's slant).
	// DEFAULT: 8
	MinProjectedPixels float64
	// MaxViewAngle is the largest angle (radians) between a face's
	// normal and the line of sight at which the face counts as seen.
	// Structured-light depth noise grows as θ²/(π/2 − θ)² (Nguyen,
	// Izadi & Lovell 2012, 3DIMPVT, DOI 10.1109/3DIMPVT.2012.84): at 80°
	// it is about 6 mm/√z on top of the face-on 1–2 mm, so a face seen
	// only beyond that angle is not measured usefully.
	// DEFAULT: 80° (1.396 rad)
	MaxViewAngle float64
	// DepthTolerance (metres): with depth images, a pixel counts only
	// where the measured depth is within this of the rendered surface
	// (about 3σ of the axial noise at 1 m by Nguyen et al. 2012, so a
	// hand or a fixture in front of the part does not count as the
	// part).
	// DEFAULT: 0.006
	DepthTolerance float64
	// HistogramEdges are the increasing lower edges of the view-count
	// bins; the last bin is open-ended. They must start at 0.
	// DEFAULT: 0, 1, 2, 3, 5, 10, 20
	HistogramEdges []int
	// Workers bounds the frames rendered at once (one renderer each);
	// 0 means GOMAXPROCS. The result does not depend on it.
	// DEFAULT: 0
	Workers int
	// Progress, when not nil, is called after each frame with the
	// number of frames done and the total, from one goroutine at a time.
	// DEFAULT: nil
	Progress func(done, total int)
}

// DefaultCoverageOptions returns the documented defaults.
func DefaultCoverageOptions() CoverageOptions {
	return CoverageOptions{
		MinVisibleFraction: 0.5,
		MinProjectedPixels: 8,
		MaxViewAngle:       80 * math.Pi / 180,
		DepthTolerance:     0.006,
		HistogramEdges:     []int{0, 1, 2, 3, 5, 10, 20},
	}
}

func (o CoverageOptions) validate() error {
	switch {
	case !(o.MinVisibleFraction > 0 && o.MinVisibleFraction <= 1):
		return fmt.Errorf("validate: coverage MinVisibleFraction %v, want a share in (0, 1]", o.MinVisibleFraction)
	case !(o.MinProjectedPixels >= 0) || math.IsInf(o.MinProjectedPixels, 0):
		return fmt.Errorf("validate: coverage MinProjectedPixels %v, want ≥ 0", o.MinProjectedPixels)
	case !(o.MaxViewAngle > 0 && o.MaxViewAngle <= math.Pi/2):
		return fmt.Errorf("validate: coverage MaxViewAngle %v rad, want within (0, π/2]", o.MaxViewAngle)
	case !(o.DepthTolerance > 0) || math.IsInf(o.DepthTolerance, 0):
		return fmt.Errorf("validate: coverage DepthTolerance %v m, want a positive length", o.DepthTolerance)
	case len(o.HistogramEdges) == 0 || o.HistogramEdges[0] != 0:
		return fmt.Errorf("validate: coverage histogram edges %v must start at 0", o.HistogramEdges)
	}
	for i := 1; i < len(o.HistogramEdges); i++ {
		if o.HistogramEdges[i] <= o.HistogramEdges[i-1] {
			return fmt.Errorf("validate: coverage histogram edges %v are not increasing", o.HistogramEdges)
		}
	}
	return nil
}

// ViewBin is one bin of the histogram of views per area: the faces seen
// in at least Min and at most Max frames (Max −1: no upper bound), their
// area and its share of the total.
type ViewBin struct {
	Min      int     `json:"min_views"`
	Max      int     `json:"max_views"`
	Area     float64 `json:"area_m2"`
	Fraction float64 `json:"fraction"`
}

// Region is a connected patch of faces (joined through shared edges)
// that no frame saw.
type Region struct {
	// Faces is the number of faces, Area their area (m²).
	Faces int     `json:"faces"`
	Area  float64 `json:"area_m2"`
	// Fraction is Area over the mesh's total area.
	Fraction float64 `json:"fraction"`
	// Centroid is the area-weighted centre of the faces; Normal their
	// area-weighted mean unit normal (the zero vector when the normals
	// cancel): (0, 0, −1) for the underside of a part standing on z = 0.
	Centroid r3.Vec `json:"centroid_m"`
	Normal   r3.Vec `json:"normal"`
	// FaceIndex lists the faces, in increasing order.
	FaceIndex []int32 `json:"-"`
}

// Coverage says how much of a surface a sweep saw and how often.
type Coverage struct {
	// Frames is the number of frames counted.
	Frames int `json:"frames"`
	// TotalArea is the area of the faces with positive area; SeenArea
	// that of the faces seen in at least one frame; SeenFraction their
	// ratio.
	TotalArea    float64 `json:"total_area_m2"`
	SeenArea     float64 `json:"seen_area_m2"`
	SeenFraction float64 `json:"seen_fraction"`
	// MeanViews is the area-weighted mean number of frames that saw a
	// face.
	MeanViews float64 `json:"mean_views"`
	// Histogram gives the area per view-count bin.
	Histogram []ViewBin `json:"histogram"`
	// Unseen lists the connected unseen regions, largest area first.
	Unseen []Region `json:"unseen"`
	// FaceViews is the number of frames that saw each face (0 for faces
	// of zero area); VertexViews the area-weighted mean of FaceViews
	// over the faces around each vertex, for colouring.
	FaceViews   []int32   `json:"-"`
	VertexViews []float32 `json:"-"`
}

// ComputeCoverage counts, for every face of m, the frames that saw it.
//
// m is in the sweep's world frame (the fused mesh itself, a reference
// model aligned to it, or the closed part for a synthetic sweep); intr
// and camToWorld are the camera and the CamToWorld pose of each frame
// used. depths is nil, or holds one depth image per frame (metres,
// Width·Height values, 0 where nothing was measured; a nil entry means
// no image for that frame): then only pixels with a valid measurement
// at the rendered depth count.
//
// Each frame renders m with mesh/render and counts the pixels that show
// each face; a face counts as seen in the frame by the rules of
// CoverageOptions: visible-area fraction for faces of at least
// MinProjectedPixels, a centroid depth test for smaller ones, and a
// slant no greater than MaxViewAngle, facing the camera (so m must be
// wound outward: counter-clockwise seen from outside, as marching cubes
// and CAD exports are; the back of an open surface never counts). A
// mesh fused from the same sweep is
// by construction mostly seen, so coverage is most telling for a
// reference model or the closed part.
//
// Degenerate input: a mesh without a face of positive area is an error
// wrapping mesh.ErrDegenerate; no frames give zero coverage.
func ComputeCoverage(ctx context.Context, m *mesh.Mesh, intr mesh.Intrinsics, camToWorld []mesh.Pose, depths [][]float32, opt CoverageOptions) (*Coverage, error) {
	if err := opt.validate(); err != nil {
		return nil, err
	}
	if m == nil {
		return nil, errors.New("validate: coverage needs a mesh")
	}
	if err := m.Validate(); err != nil {
		return nil, fmt.Errorf("validate: coverage: %w", err)
	}
	if err := intr.Validate(); err != nil {
		return nil, fmt.Errorf("validate: coverage: %w", err)
	}
	if len(camToWorld) > MaxCoverageFrames {
		return nil, fmt.Errorf("validate: coverage of %d frames, more than %d", len(camToWorld), MaxCoverageFrames)
	}
	if depths != nil && len(depths) != len(camToWorld) {
		return nil, fmt.Errorf("validate: coverage: %d depth images for %d poses", len(depths), len(camToWorld))
	}
	npx := intr.Width * intr.Height
	for i, d := range depths {
		if d != nil && len(d) != npx {
			return nil, fmt.Errorf("validate: coverage: depth image of frame %d has %d values, want %d×%d", i, len(d), intr.Width, intr.Height)
		}
	}
	for i, p := range camToWorld {
		if err := checkPose(p); err != nil {
			return nil, fmt.Errorf("validate: coverage: pose of frame %d: %w", i, err)
		}
	}
	areas := m.FaceAreas()
	var total float64
	for _, a := range areas {
		total += a
	}
	if !(total > 0) || math.IsInf(total, 0) {
		return nil, fmt.Errorf("validate: coverage of a mesh without area: %w", mesh.ErrDegenerate)
	}

	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = max(1, min(workers, len(camToWorld)))
	type worker struct {
		r      *render.Renderer
		frame  render.Frame
		views  []int32
		counts []int32
		cam    []r3.Vec
		err    error
	}
	pool := make(chan *worker, workers)
	all := make([]*worker, workers)
	for i := range all {
		r, err := render.NewRenderer(intr)
		if err != nil {
			return nil, fmt.Errorf("validate: coverage: %w", err)
		}
		all[i] = &worker{r: r, views: make([]int32, len(m.Faces)), counts: make([]int32, len(m.Faces)), cam: make([]r3.Vec, len(m.Vertices))}
		pool <- all[i]
	}
	ropt := render.DefaultOptions()
	// A closed, consistently oriented surface seen from outside always
	// shows a front face first, so back faces can be skipped without
	// changing any pixel: half the rasterisation. An open surface keeps
	// them, because its back can hide what lies behind it.
	ropt.CullBackFaces = m.IsWatertight() && m.IsConsistentlyOriented() && m.SignedVolume() > 0
	var mu sync.Mutex
	done := 0
	par.For(len(camToWorld), workers, func(f int) {
		if ctx.Err() != nil {
			return
		}
		w := <-pool
		defer func() { pool <- w }()
		if w.err != nil {
			return
		}
		var depth []float32
		if depths != nil {
			depth = depths[f]
		}
		if err := coverFrame(w.r, &w.frame, m, areas, camToWorld[f].Inv(), depth, ropt, opt, w.views, w.counts, w.cam); err != nil {
			w.err = fmt.Errorf("validate: coverage: frame %d: %w", f, err)
			return
		}
		if opt.Progress != nil {
			mu.Lock()
			done++
			opt.Progress(done, len(camToWorld))
			mu.Unlock()
		}
	})
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	views := make([]int32, len(m.Faces))
	for _, w := range all {
		if w.err != nil {
			return nil, w.err
		}
		for i, v := range w.views {
			views[i] += v
		}
	}
	return summariseCoverage(m, areas, total, views, len(camToWorld), opt.HistogramEdges), nil
}

// checkPose reports a pose whose rotation is not one (within 1e-6) or
// whose entries are not finite.
func checkPose(p mesh.Pose) error {
	_, err := mesh.PoseFromMat4(p.Mat4(), 1e-6)
	return err
}

// coverFrame renders one frame and adds 1 to views[i] for every face i
// it sees. counts must be all zero on entry and is left so; cam is
// scratch for the camera-frame vertices.
func coverFrame(r *render.Renderer, fr *render.Frame, m *mesh.Mesh, areas []float64, worldToCam mesh.Pose,
	depth []float32, ropt render.Options, opt CoverageOptions, views, counts []int32, cam []r3.Vec) error {
	if err := r.RenderInto(fr, []render.Object{{Mesh: m, ModelToCam: worldToCam, Color: mesh.RGB{R: 200, G: 200, B: 200}}}, ropt); err != nil {
		return err
	}
	for i, t := range fr.Triangle {
		if t < 0 || fr.Object[i] != 0 {
			continue
		}
		if depth != nil {
			d := float64(depth[i])
			if !(d > 0) || math.Abs(d-float64(fr.Depth[i])) > opt.DepthTolerance {
				continue
			}
		}
		counts[t]++
	}
	for i, v := range m.Vertices {
		cam[i] = worldToCam.Apply(v)
	}
	intr := r.Intrinsics()
	cosMax := math.Cos(opt.MaxViewAngle)
	for fi, f := range m.Faces {
		n := counts[fi]
		counts[fi] = 0
		if areas[fi] <= 0 {
			continue
		}
		a, b, c := cam[f[0]], cam[f[1]], cam[f[2]]
		cen := r3.Scale(1.0/3, r3.Add(r3.Add(a, b), c))
		nrm := mesh.Normalize(r3.Cross(r3.Sub(b, a), r3.Sub(c, a)))
		dist := r3.Norm(cen)
		if dist == 0 {
			continue
		}
		// Front-facing only: the outward normal points at the camera.
		cosT := -r3.Dot(nrm, cen) / dist
		if cosT < cosMax {
			continue
		}
		if a.Z <= ropt.Near || b.Z <= ropt.Near || c.Z <= ropt.Near {
			// Cut by the near plane: no projected area to compare with;
			// any valid pixel counts.
			if n > 0 {
				views[fi]++
			}
			continue
		}
		au, av := intr.Project(a)
		bu, bv := intr.Project(b)
		cu, cv := intr.Project(c)
		proj := math.Abs((bu-au)*(cv-av)-(cu-au)*(bv-av)) / 2
		if proj >= opt.MinProjectedPixels {
			if float64(n) >= opt.MinVisibleFraction*proj {
				views[fi]++
			}
			continue
		}
		if n > 0 {
			views[fi]++
			continue
		}
		// Too small for a pixel count: test the centroid's pixel.
		u, v := intr.Project(cen)
		x, y := int(math.Round(u)), int(math.Round(v))
		if x < 0 || y < 0 || x >= intr.Width || y >= intr.Height {
			continue
		}
		p := y*intr.Width + x
		z := float64(fr.Depth[p])
		if !(z > 0) || fr.Object[p] != 0 {
			continue
		}
		if depth != nil {
			d := float64(depth[p])
			if !(d > 0) || math.Abs(d-z) > opt.DepthTolerance {
				continue
			}
		}
		// The depth across 1.5 pixels of a face slanted by θ changes by
		// 1.5·(z/f)·tan θ; face-on, allow 1.5 pixel footprints.
		tanT := math.Sqrt(math.Max(0, 1-cosT*cosT)) / cosT
		tol := 1.5 * cen.Z / math.Min(intr.Fx, intr.Fy) * math.Max(1, tanT)
		if math.Abs(z-cen.Z) <= tol {
			views[fi]++
		}
	}
	return nil
}

// summariseCoverage turns per-face view counts into a Coverage.
func summariseCoverage(m *mesh.Mesh, areas []float64, total float64, views []int32, frames int, edges []int) *Coverage {
	cov := &Coverage{Frames: frames, TotalArea: total, FaceViews: views}
	cov.Histogram = make([]ViewBin, len(edges))
	for i, e := range edges {
		cov.Histogram[i].Min = e
		cov.Histogram[i].Max = -1
		if i+1 < len(edges) {
			cov.Histogram[i].Max = edges[i+1] - 1
		}
	}
	var weighted float64
	for i, a := range areas {
		if a <= 0 {
			continue
		}
		v := int(views[i])
		if v > 0 {
			cov.SeenArea += a
		}
		weighted += a * float64(v)
		b := sort.Search(len(edges), func(k int) bool { return edges[k] > v }) - 1
		cov.Histogram[b].Area += a
	}
	cov.SeenFraction = cov.SeenArea / total
	cov.MeanViews = weighted / total
	for i := range cov.Histogram {
		cov.Histogram[i].Fraction = cov.Histogram[i].Area / total
	}
	// Per-vertex values: area-weighted mean of the incident faces.
	vsum := make([]float64, len(m.Vertices))
	vw := make([]float64, len(m.Vertices))
	for i, f := range m.Faces {
		for _, v := range f {
			vsum[v] += areas[i] * float64(views[i])
			vw[v] += areas[i]
		}
	}
	cov.VertexViews = make([]float32, len(m.Vertices))
	for i := range vsum {
		if vw[i] > 0 {
			cov.VertexViews[i] = float32(vsum[i] / vw[i])
		}
	}
	cov.Unseen = unseenRegions(m, areas, views, total)
	return cov
}

// unseenRegions groups the unseen faces of positive area into patches
// connected through shared edges (union–find; Tarjan 1975, "Efficiency
// of a good but not linear set union algorithm", JACM 22(2), DOI
// 10.1145/321879.321884), largest area first (ties: lowest face index).
func unseenRegions(m *mesh.Mesh, areas []float64, views []int32, total float64) []Region {
	parent := make([]int32, len(m.Faces))
	for i := range parent {
		parent[i] = int32(i)
	}
	find := func(x int32) int32 {
		for parent[x] != x {
			parent[x] = parent[parent[x]]
			x = parent[x]
		}
		return x
	}
	// Faces of zero area (marching cubes leaves some where the surface
	// passes through lattice points) are never seen but still join
	// their neighbours: without them a flat underside falls apart.
	unseen := func(i int) bool { return views[i] == 0 }
	edgeFace := make(map[uint64]int32)
	for i, f := range m.Faces {
		if !unseen(i) {
			continue
		}
		for k := 0; k < 3; k++ {
			u, v := f[k], f[(k+1)%3]
			if u > v {
				u, v = v, u
			}
			key := uint64(u)<<32 | uint64(v)
			if j, ok := edgeFace[key]; ok {
				a, b := find(int32(i)), find(j)
				if a != b {
					if a < b {
						parent[b] = a
					} else {
						parent[a] = b
					}
				}
			} else {
				edgeFace[key] = int32(i)
			}
		}
	}
	index := map[int32]int{}
	var out []Region
	for i, f := range m.Faces {
		if !unseen(i) || areas[i] <= 0 {
			continue
		}
		root := find(int32(i))
		k, ok := index[root]
		if !ok {
			k = len(out)
			index[root] = k
			out = append(out, Region{})
		}
		r := &out[k]
		a := areas[i]
		r.Faces++
		r.Area += a
		c := r3.Scale(1.0/3, r3.Add(r3.Add(m.Vertices[f[0]], m.Vertices[f[1]]), m.Vertices[f[2]]))
		r.Centroid = r3.Add(r.Centroid, r3.Scale(a, c))
		r.Normal = r3.Add(r.Normal, r3.Scale(a, m.FaceNormal(f)))
		r.FaceIndex = append(r.FaceIndex, int32(i))
	}
	for i := range out {
		r := &out[i]
		r.Centroid = r3.Scale(1/r.Area, r.Centroid)
		r.Normal = mesh.Normalize(r.Normal)
		r.Fraction = r.Area / total
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Area > out[j].Area })
	return out
}

// SaveCoveragePLY writes m (the mesh cov was computed on) to path as
// binary PLY with each vertex coloured by its view count (CoverageColor,
// ramp ending at the largest vertex value, at least 2) and a float
// property "views" (VertexViews), replacing the file atomically.
func SaveCoveragePLY(path string, m *mesh.Mesh, cov *Coverage) error {
	if m == nil || cov == nil || len(cov.VertexViews) != len(m.Vertices) {
		return errors.New("validate: SaveCoveragePLY needs the mesh the coverage was computed on")
	}
	full := 2
	for _, v := range cov.VertexViews {
		full = max(full, int(math.Ceil(float64(v))))
	}
	out := *m
	out.Colors = make([]mesh.RGB, len(m.Vertices))
	for i, v := range cov.VertexViews {
		out.Colors[i] = CoverageColor(int(math.Round(float64(v))), full)
		if v > 0 && v < 0.5 {
			out.Colors[i] = CoverageColor(1, full) // touched by a seen face
		}
	}
	opt := mesh.DefaultPLYOptions()
	opt.Comments = []string{fmt.Sprintf("scanfold coverage: views = area-weighted mean number of the %d frames that saw the faces around each vertex", cov.Frames)}
	opt.VertexScalars = []mesh.NamedScalars{{Name: "views", Values: cov.VertexViews}}
	if err := mesh.SaveMeshPLY(path, &out, opt); err != nil {
		return fmt.Errorf("validate: %w", err)
	}
	return nil
}
