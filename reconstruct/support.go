package reconstruct

import (
	"errors"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// ErrNoPart is returned when nothing stands on the support: the sweep
// shows a bare plate or table.
var ErrNoPart = errors.New("no part found on the support")

// SupportOptions tunes FindSupport.
type SupportOptions struct {
	// RANSAC fits the support plane.
	// DEFAULT: DefaultRANSACOptions()
	RANSAC RANSACOptions
	// Stride back-projects every n-th pixel in both directions.
	// DEFAULT: 2 (at 4, the demo M16 hex nut, 24 mm across flats at
	// 0.55 m, gave
	// 20–27 points on the plate, around MinPoints: in two sweeps of
	// four it was missed and the plate fused as the part)
	Stride int
	// MinDepth and MaxDepth bound the depths used (metres).
	// DEFAULT: 0.15, 1.5
	MinDepth, MaxDepth float64
	// Central is the fraction of the image width and height, around the
	// centre, where the support and the part are looked for.
	// DEFAULT: 0.6
	Central float64
	// MinHeight and MaxHeight bound how far above the support a point of
	// the part lies (metres). MinHeight must clear the plane's noise.
	// DEFAULT: 0.0025, 0.3 (2σ of the axial noise at 0.55 m, so a 4 mm
	// flange lying flat still rises clear of the plate)
	MinHeight, MaxHeight float64
	// MinPoints is the fewest back-projected points (at Stride) a part
	// must have.
	// DEFAULT: 25
	MinPoints int
	// MaxPlanes is how many planes are tried, largest first, before
	// concluding that nothing stands on any of them.
	// DEFAULT: 3
	MaxPlanes int
	// MaxFlatRadius: a raised plane on the support with nothing found on
	// it and wider than this radius (metres) is a plate whose part went
	// unseen, not a flat part lying there: an error wrapping ErrNoPart.
	// 0 turns the test off.
	// DEFAULT: 0.1 (parts are up to 150 mm long, a radius of 75 mm
	// lying flat; turntable plates are wider)
	MaxFlatRadius float64
}

// DefaultSupportOptions returns the documented defaults.
func DefaultSupportOptions() SupportOptions {
	return SupportOptions{
		RANSAC: DefaultRANSACOptions(), Stride: 2, MinDepth: 0.15, MaxDepth: 1.5,
		Central: 0.6, MinHeight: 0.0025, MaxHeight: 0.3, MinPoints: 25, MaxPlanes: 3,
		MaxFlatRadius: 0.1,
	}
}

// Support is what FindSupport saw in one depth image, in its camera
// frame.
type Support struct {
	// Plane is the support surface (plate or table top), its normal
	// pointing up, toward the side the part stands on and the camera is.
	Plane Plane
	// PlaneInliers is the number of back-projected points on the plane.
	PlaneInliers int
	// Centre is the foot of the part's centroid on the plane.
	Centre r3.Vec
	// Radius is the part's horizontal extent around Centre and Height its
	// top above the plane (98th percentiles, robust to stray points).
	Radius, Height float64
	// SupportCentre and SupportRadius describe the support surface
	// around the part: the centroid of its points connected to the part's
	// surroundings, and the 95th percentile of their distance from it
	// (for a turntable, about the plate; for a table, what the camera saw
	// of it). Zero when the plane could not be refined.
	SupportCentre r3.Vec
	SupportRadius float64
	// Points are the part's back-projected points (camera frame), and
	// Pixels their pixel indices (y·width + x) in the depth image.
	Points []r3.Vec
	Pixels []int
}

// FindSupport finds the support plane and the part standing on it in
// one depth image: RANSAC planes of the central region, largest first;
// above each, the points between MinHeight and MaxHeight grouped into
// connected components on the pixel grid; the part is the largest
// component whose pixels centre lies in the central region. It returns
// an error wrapping ErrNoPart when no plane carries such a component.
func FindSupport(depth []float32, intr mesh.Intrinsics, opt SupportOptions) (Support, error) {
	if len(depth) != intr.Width*intr.Height {
		return Support{}, fmt.Errorf("reconstruct: depth has %d pixels for %d×%d", len(depth), intr.Width, intr.Height)
	}
	s := max(1, opt.Stride)
	gw, gh := (intr.Width+s-1)/s, (intr.Height+s-1)/s
	// Back-project the stride grid; grid cell g holds point index or -1.
	grid := make([]int32, gw*gh)
	var pts []r3.Vec
	var central []int // indices into pts
	cx0, cx1 := float64(intr.Width)*(1-opt.Central)/2, float64(intr.Width)*(1+opt.Central)/2
	cy0, cy1 := float64(intr.Height)*(1-opt.Central)/2, float64(intr.Height)*(1+opt.Central)/2
	for gy := 0; gy < gh; gy++ {
		for gx := 0; gx < gw; gx++ {
			x, y := gx*s, gy*s
			z := float64(depth[y*intr.Width+x])
			grid[gy*gw+gx] = -1
			if !(z >= opt.MinDepth && z <= opt.MaxDepth) {
				continue
			}
			grid[gy*gw+gx] = int32(len(pts))
			if fx, fy := float64(x), float64(y); fx >= cx0 && fx <= cx1 && fy >= cy0 && fy <= cy1 {
				central = append(central, len(pts))
			}
			pts = append(pts, intr.BackProject(float64(x), float64(y), z))
		}
	}
	if len(central) < 3 {
		return Support{}, fmt.Errorf("reconstruct: only %d valid depth points in the central region between %.2f and %.2f m: %w", len(central), opt.MinDepth, opt.MaxDepth, ErrNoPart)
	}
	cand := make([]r3.Vec, len(central))
	for i, c := range central {
		cand[i] = pts[c]
	}
	var lastErr error = ErrNoPart
	for attempt := 0; attempt < max(1, opt.MaxPlanes) && len(cand) >= 3; attempt++ {
		fit, err := FitPlaneRANSAC(cand, opt.RANSAC)
		if err != nil {
			break
		}
		pl := fit.Plane
		if pl.Offset < 0 { // the camera (origin) must be on the positive side
			pl = pl.Flip()
		}
		sup, err := partAbove(pts, grid, gw, gh, s, intr.Width, intr.Fx, pl, opt, cx0, cx1, cy0, cy1)
		inliers := len(fit.Inliers)
		// A plate on a table, a board on a bench: what stands on the plane
		// may itself be mostly a raised parallel plane, and the part stands
		// on that. Step up while the component is such a plane.
		for step := 0; err == nil && step < 3; step++ {
			top, ok := raisedSupport(sup, pl, opt)
			if !ok {
				break
			}
			next, err2 := partAbove(pts, grid, gw, gh, s, intr.Width, intr.Fx, top.Plane, opt, cx0, cx1, cy0, cy1)
			if err2 != nil && opt.MaxFlatRadius > 0 {
				// Nothing stands on the raised plane. A flat part lying
				// on the support is such a plane too; one wider than
				// any part is a plate whose part went unseen: fusing the
				// plate as the part would be worse than stopping.
				if _, r := planeSpread(sup.Points, top); r > opt.MaxFlatRadius {
					return Support{}, fmt.Errorf("reconstruct: the support carries a flat plate %.0f mm across, %.0f mm up, with nothing of %d or more points on it (every %d pixels): the part on it is too small at this distance, or missing: %w",
						2000*r, 1000*pl.Distance(sup.Points[top.Inliers[0]]), opt.MinPoints, s, ErrNoPart)
				}
			}
			if err2 != nil || !surrounds(sup.Points, top, next) {
				break
			}
			pl, sup, inliers = top.Plane, next, len(top.Inliers)
		}
		if err == nil {
			// Refit the support on its points near the plane, leaving out
			// the part and its surroundings: a part's flat flange a few
			// millimetres up, blurred by noise, would tilt the fit.
			if refit, idx, ok := refineSupport(pts, grid, gw, gh, s, intr.Width, pl, sup, opt); ok {
				if again, err := partAbove(pts, grid, gw, gh, s, intr.Width, intr.Fx, refit, opt, cx0, cx1, cy0, cy1); err == nil {
					sup, inliers = again, len(idx)
					var c r3.Vec
					for _, i := range idx {
						c = r3.Add(c, pts[i])
					}
					c = r3.Scale(1/float64(len(idx)), c)
					d := make([]float64, len(idx))
					for k, i := range idx {
						v := r3.Sub(pts[i], c)
						d[k] = r3.Norm(r3.Sub(v, r3.Scale(r3.Dot(v, refit.Normal), refit.Normal)))
					}
					sup.SupportCentre, sup.SupportRadius = c, percentile(d, 0.95)
				}
			}
			sup.PlaneInliers = inliers
			return sup, nil
		}
		lastErr = err
		// Remove this plane's inliers and look for the next one.
		keep := cand[:0]
		j := 0
		for i, p := range cand {
			if j < len(fit.Inliers) && fit.Inliers[j] == i {
				j++
				continue
			}
			keep = append(keep, p)
		}
		cand = keep
	}
	return Support{}, lastErr
}

// raisedSupport reports whether the component sup found above pl is
// largely a plane parallel to pl (within 10°), raised above it by more
// than MinHeight, holding at least 30% of the component's points: a plate
// or board that the part stands on. It returns that plane, oriented like
// pl.
func raisedSupport(sup Support, pl Plane, opt SupportOptions) (PlaneFit, bool) {
	if len(sup.Points) < 3*opt.MinPoints {
		return PlaneFit{}, false
	}
	fit, err := FitPlaneRANSAC(sup.Points, opt.RANSAC)
	if err != nil {
		return PlaneFit{}, false
	}
	if r3.Dot(fit.Plane.Normal, pl.Normal) < 0 {
		fit.Plane = fit.Plane.Flip()
	}
	if r3.Dot(fit.Plane.Normal, pl.Normal) < math.Cos(10*math.Pi/180) {
		return PlaneFit{}, false
	}
	if float64(len(fit.Inliers)) < 0.3*float64(len(sup.Points)) {
		return PlaneFit{}, false
	}
	// Height of the raised plane above pl, measured at its inliers.
	var h float64
	for _, i := range fit.Inliers {
		h += pl.Distance(sup.Points[i])
	}
	if h/float64(len(fit.Inliers)) < opt.MinHeight {
		return PlaneFit{}, false
	}
	return fit, true
}

// refineSupport refits pl by least squares on the points near it that
// connect, over the grid, to the part's surroundings, excluding every
// grid cell within three cells of the part.
func refineSupport(pts []r3.Vec, grid []int32, gw, gh, s, width int, pl Plane, part Support, opt SupportOptions) (Plane, []int, bool) {
	excluded := make([]bool, len(grid))
	const r = 3
	for _, pix := range part.Pixels {
		gx, gy := (pix%width)/s, (pix/width)/s
		for dy := -r; dy <= r; dy++ {
			for dx := -r; dx <= r; dx++ {
				if x, y := gx+dx, gy+dy; x >= 0 && y >= 0 && x < gw && y < gh {
					excluded[y*gw+x] = true
				}
			}
		}
	}
	// Two rounds: the full threshold first, so that a slightly tilted
	// starting plane still takes in the whole support on both sides, then
	// half of it around the better plane.
	var idx []int
	var stack []int
	seen := make([]bool, len(grid))
	for _, thr := range []float64{opt.RANSAC.Threshold, opt.RANSAC.Threshold / 2} {
		// Flood-fill the plane's cells that connect to the part's
		// surroundings, so that other surfaces crossing the plane's
		// extension (walls, clutter) stay out.
		idx, stack = idx[:0], stack[:0]
		clear(seen)
		onPlane := func(g int) bool {
			i := grid[g]
			return i >= 0 && !excluded[g] && math.Abs(pl.Distance(pts[i])) <= thr
		}
		for g := range grid {
			if excluded[g] {
				continue
			}
			gx, gy := g%gw, g/gw
			touches := false
			for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				if x, y := gx+d[0], gy+d[1]; x >= 0 && y >= 0 && x < gw && y < gh && excluded[y*gw+x] {
					touches = true
				}
			}
			if touches && onPlane(g) {
				seen[g] = true
				stack = append(stack, g)
			}
		}
		for len(stack) > 0 {
			g := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			idx = append(idx, int(grid[g]))
			gx, gy := g%gw, g/gw
			for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				x, y := gx+d[0], gy+d[1]
				if x < 0 || y < 0 || x >= gw || y >= gh {
					continue
				}
				n := y*gw + x
				if !seen[n] && onPlane(n) {
					seen[n] = true
					stack = append(stack, n)
				}
			}
		}
		if len(idx) < 3 { // (a nil idx would mean every point)
			return pl, nil, false
		}
		refit, err := LeastSquaresPlane(pts, idx)
		if err != nil {
			return pl, nil, false
		}
		if r3.Dot(refit.Normal, pl.Normal) < 0 {
			refit = refit.Flip()
		}
		pl = refit
	}
	return pl, idx, true
}

// surrounds reports whether the raised plane top reaches well beyond the
// part found on it, all around: the part's foot lies within 0.8 of the
// spread of top's inliers about their centroid (95th percentile of
// their distances), and that spread is at least 1.5 times the part's
// radius plus 1 cm. A turntable plate surrounds the part on it; the top
// of a box does not surround clutter standing elsewhere, nor does the
// flat flange of an angle bracket surround the upright one.
func surrounds(points []r3.Vec, top PlaneFit, part Support) bool {
	n := top.Plane.Normal
	flat := func(v r3.Vec) r3.Vec { return r3.Sub(v, r3.Scale(r3.Dot(v, n), n)) }
	c, spread := planeSpread(points, top)
	return r3.Norm(flat(r3.Sub(part.Centre, c))) <= 0.8*spread && spread >= 1.5*part.Radius+0.01
}

// planeSpread returns the centroid of a plane fit's inliers and the
// 95th percentile of their distance from it within the plane: the
// raised plane's radius.
func planeSpread(points []r3.Vec, top PlaneFit) (r3.Vec, float64) {
	n := top.Plane.Normal
	var c r3.Vec
	for _, i := range top.Inliers {
		c = r3.Add(c, points[i])
	}
	c = r3.Scale(1/float64(len(top.Inliers)), c)
	d := make([]float64, 0, len(top.Inliers))
	for _, i := range top.Inliers {
		v := r3.Sub(points[i], c)
		d = append(d, r3.Norm(r3.Sub(v, r3.Scale(r3.Dot(v, n), n))))
	}
	return c, percentile(d, 0.95)
}

func partAbove(pts []r3.Vec, grid []int32, gw, gh, s, width int, fx float64, pl Plane, opt SupportOptions, cx0, cx1, cy0, cy1 float64) (Support, error) {
	height := func(i int32) float64 { return pl.Distance(pts[i]) }
	above := func(g int) bool {
		i := grid[g]
		if i < 0 {
			return false
		}
		h := height(i)
		return h >= opt.MinHeight && h <= opt.MaxHeight
	}
	// Connected components over 4-neighbours on the grid, joined when the
	// two points are within a gap that a continuous surface could span:
	// five times the grid step at that depth (surfaces up to ~78° from
	// face-on stay connected; a jump to the background does not).
	label := make([]int32, len(grid))
	for i := range label {
		label[i] = -1
	}
	type comp struct {
		n      int
		sx, sy float64
	}
	var comps []comp
	var stack []int
	for g := range grid {
		if label[g] >= 0 || !above(g) {
			continue
		}
		id := int32(len(comps))
		comps = append(comps, comp{})
		label[g] = id
		stack = append(stack[:0], g)
		for len(stack) > 0 {
			c := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			cx, cy := c%gw, c/gw
			comps[id].n++
			comps[id].sx += float64(cx * s)
			comps[id].sy += float64(cy * s)
			p := pts[grid[c]]
			gap := 5 * float64(s) * p.Z / fx // five grid steps at this depth
			for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				nx, ny := cx+d[0], cy+d[1]
				if nx < 0 || ny < 0 || nx >= gw || ny >= gh {
					continue
				}
				ng := ny*gw + nx
				if label[ng] >= 0 || !above(ng) {
					continue
				}
				if r3.Norm(r3.Sub(pts[grid[ng]], p)) > gap {
					continue
				}
				label[ng] = id
				stack = append(stack, ng)
			}
		}
	}
	// A part stands on the support: the support must show around the
	// part's foot. For every cell of a component's lowest layer (within
	// 1 cm of the plane), look for a support cell within three grid cells
	// and 3 cm in space (image neighbours can be far apart in depth);
	// the share of foot cells that find one says how well the plane
	// carries the component. Things standing on a lower surface beyond
	// the support's edge (clutter behind a turntable plate) find none.
	// A support cell must be part of a patch of the plane, not a slice
	// where some other surface (a box's wall behind the plate) crosses
	// the plane's extension: at least 15 of the 25 cells around it lie on
	// the plane.
	near := 3
	onPlane := make([]bool, len(grid))
	for g, i := range grid {
		onPlane[g] = i >= 0 && math.Abs(height(i)) <= opt.RANSAC.Threshold
	}
	inPlane := func(g int) bool {
		if !onPlane[g] {
			return false
		}
		gx, gy := g%gw, g/gw
		n := 0
		for y := max(0, gy-2); y <= min(gh-1, gy+2); y++ {
			for x := max(0, gx-2); x <= min(gw-1, gx+2); x++ {
				if onPlane[y*gw+x] {
					n++
				}
			}
		}
		return n >= 15
	}
	footN := make([]int, len(comps))
	footOK := make([]int, len(comps))
	for g, l := range label {
		if l < 0 || height(grid[g]) > opt.MinHeight+0.01 {
			continue
		}
		footN[l]++
		cx, cy := g%gw, g/gw
	search:
		for dy := -near; dy <= near; dy++ {
			for dx := -near; dx <= near; dx++ {
				nx, ny := cx+dx, cy+dy
				if nx >= 0 && ny >= 0 && nx < gw && ny < gh && inPlane(ny*gw+nx) &&
					r3.Norm2(r3.Sub(pts[grid[ny*gw+nx]], pts[grid[g]])) <= 0.03*0.03 {
					footOK[l]++
					break search
				}
			}
		}
	}
	// Score: size, times how well the plane carries it, discounted by
	// the distance of its pixel centroid from the image centre.
	icx, icy := (cx0+cx1)/2, (cy0+cy1)/2
	half := math.Hypot(cx1-cx0, cy1-cy0) / 2
	best, bestScore := int32(-1), 0.0
	for id, c := range comps {
		mx, my := c.sx/float64(c.n), c.sy/float64(c.n)
		if c.n < opt.MinPoints || mx < cx0 || mx > cx1 || my < cy0 || my > cy1 {
			continue
		}
		carried := 0.0
		if footN[id] > 0 {
			carried = float64(footOK[id]) / float64(footN[id])
		}
		if carried < 0.25 {
			continue
		}
		d := math.Hypot(mx-icx, my-icy) / half
		score := float64(c.n) * carried / (1 + 4*d*d)
		if best < 0 || score > bestScore {
			best, bestScore = int32(id), score
		}
	}
	if best < 0 {
		return Support{}, fmt.Errorf("reconstruct: nothing of %d or more points stands on the support, %.0f to %.0f mm above it, near the image centre: %w", opt.MinPoints, opt.MinHeight*1000, opt.MaxHeight*1000, ErrNoPart)
	}
	var part []r3.Vec
	var pix []int
	var c r3.Vec
	for g, l := range label {
		if l == best {
			p := pts[grid[g]]
			part = append(part, p)
			pix = append(pix, (g/gw)*s*width+(g%gw)*s)
			c = r3.Add(c, p)
		}
	}
	c = r3.Scale(1/float64(len(part)), c)
	foot := r3.Sub(c, r3.Scale(pl.Distance(c), pl.Normal))
	radii := make([]float64, len(part))
	heights := make([]float64, len(part))
	for i, p := range part {
		h := pl.Distance(p)
		heights[i] = h
		radii[i] = r3.Norm(r3.Sub(r3.Sub(p, r3.Scale(h, pl.Normal)), foot))
	}
	return Support{Plane: pl, Centre: foot, Radius: percentile(radii, 0.98), Height: percentile(heights, 0.98), Points: part, Pixels: pix}, nil
}

// percentile returns the q-quantile of v (nearest rank); v is reordered.
func percentile(v []float64, q float64) float64 {
	if len(v) == 0 {
		return 0
	}
	slices.Sort(v)
	i := int(math.Ceil(q*float64(len(v)))) - 1
	return v[max(0, min(i, len(v)-1))]
}
