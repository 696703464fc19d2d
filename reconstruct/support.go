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
	// DEFAULT: 4
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
	// DEFAULT: 0.004, 0.3
	MinHeight, MaxHeight float64
	// MinPoints is the fewest back-projected points (at Stride) a part
	// must have.
	// DEFAULT: 25
	MinPoints int
	// MaxPlanes is how many planes are tried, largest first, before
	// concluding that nothing stands on any of them.
	// DEFAULT: 3
	MaxPlanes int
}

// DefaultSupportOptions returns the documented defaults.
func DefaultSupportOptions() SupportOptions {
	return SupportOptions{
		RANSAC: DefaultRANSACOptions(), Stride: 4, MinDepth: 0.15, MaxDepth: 1.5,
		Central: 0.6, MinHeight: 0.004, MaxHeight: 0.3, MinPoints: 25, MaxPlanes: 3,
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
		if err == nil {
			sup.PlaneInliers = len(fit.Inliers)
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
	best := int32(-1)
	for id, c := range comps {
		mx, my := c.sx/float64(c.n), c.sy/float64(c.n)
		if c.n < opt.MinPoints || mx < cx0 || mx > cx1 || my < cy0 || my > cy1 {
			continue
		}
		if best < 0 || c.n > comps[best].n {
			best = int32(id)
		}
	}
	if best < 0 {
		return Support{}, fmt.Errorf("reconstruct: nothing of %d or more points stands between %.0f and %.0f mm above the support near the image centre: %w", opt.MinPoints, opt.MinHeight*1000, opt.MaxHeight*1000, ErrNoPart)
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
