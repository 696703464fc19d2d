package reconstruct

import (
	"fmt"
	"image"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
	"github.com/scanfold/scanfold/mesh"
)

// PlateView is one frame of a turntable sweep for EstimateAxisFromPlate.
type PlateView struct {
	Depth []float32
	Color *image.NRGBA
	Intr  mesh.Intrinsics
	// Angle is the plate's turn from the reference view (the first),
	// radians, right-handed about the plate's upward normal.
	Angle float64
}

// PlateAxisOptions tunes EstimateAxisFromPlate.
type PlateAxisOptions struct {
	// Cell is the spacing of the plate images resampled in the plate's
	// plane (metres).
	// DEFAULT: 0.001 (about the pixel footprint at 0.5 m; the far side
	// of a plate seen from 30° is sampled twice as coarsely)
	Cell float64
	// Range is the half-width of the square, centred on the start, that
	// is searched for the axis (metres); Step is the search's finest
	// step.
	// DEFAULT: 0.006, 0.00004
	Range, Step float64
	// Band is how far from the plate's plane a depth reading may lie
	// for its pixel to show the plate (metres); the part and whatever
	// it hides are left out by it.
	// DEFAULT: 0.004 (over 3σ of the axial noise at 0.55 m)
	Band float64
	// MinCorrelation is the weakest mean normalised cross-correlation
	// between the reference plate image and the others, at the
	// estimate, for the plate's texture to be trusted.
	// DEFAULT: 0.6
	MinCorrelation float64
	// MinCells is the fewest plate cells two views must share.
	// DEFAULT: 2000
	MinCells int
}

// DefaultPlateAxisOptions returns the documented defaults.
func DefaultPlateAxisOptions() PlateAxisOptions {
	return PlateAxisOptions{Cell: 0.001, Range: 0.006, Step: 0.00004, Band: 0.004, MinCorrelation: 0.6, MinCells: 2000}
}

// PlateAxisFit is the outcome of EstimateAxisFromPlate.
type PlateAxisFit struct {
	// Point is where the axis crosses the plate's top plane.
	Point r3.Vec
	// Correlation is the cells-weighted mean normalised cross-correlation
	// of the turned reference image with each other view at Point.
	Correlation float64
	// Cells is how many cell comparisons the correlation rests on;
	// Evaluations how many trial points were scored.
	Cells, Evaluations int
}

// ErrWeakTexture reports a plate whose texture does not pin the axis
// (too plain, or too little of it seen).
var ErrWeakTexture = fmt.Errorf("reconstruct: the plate's texture is too weak to locate the axis")

// EstimateAxisFromPlate finds where a turntable's axis crosses the
// plate from the plate's own texture (markings, grooves, grain), which
// turns rigidly with the part. Each view's colour image is resampled on
// a grid of Cell in the plate's plane (the plane known from the
// support fit, so no depth enters the geometry), keeping only cells
// whose pixel's depth lies within Band of the plane. The reference
// view's plate image, turned by each view's known angle about a trial
// axis point, should reproduce that view's; the trial point with the
// highest normalised cross-correlation (robust to the per-frame gain,
// white balance and light changes) is found by a coarse-to-fine grid
// search (5×5 trials a level, the step shrinking by 3 down to Step),
// sampling the reference bilinearly. This is direct image alignment
// (Lucas & Kanade 1981, IJCAI; correlation as in Lewis 1995, "Fast
// normalized cross-correlation", Vision Interface) with the motion
// reduced to the two unknowns of the axis.
//
// A wrong axis point c' shifts the predicted image by (I − R)c', the
// same for every cell, so every part of the texture speaks to it, and a
// flat plate has no depth edges to smear. The plate's centre is not
// assumed to lie on the axis.
//
// start is the first guess (on or near the plane), radius bounds the
// plate around it, and views[0] is the reference; the others should
// turn by angles well away from 0 (|I − R| = 2 sin(a/2)). It returns
// ErrWeakTexture when the best correlation is below MinCorrelation or
// the best point lies on the edge of the search.
func EstimateAxisFromPlate(plate Plane, start r3.Vec, radius float64, views []PlateView, opt PlateAxisOptions) (PlateAxisFit, error) {
	up := mesh.Normalize(plate.Normal)
	if up == (r3.Vec{}) {
		return PlateAxisFit{}, fmt.Errorf("reconstruct: plate normal is zero: %w", mesh.ErrDegenerate)
	}
	if len(views) < 2 {
		return PlateAxisFit{}, fmt.Errorf("reconstruct: the plate axis needs at least two views, got %d: %w", len(views), mesh.ErrDegenerate)
	}
	if !(opt.Cell > 0) || !(opt.Range > 0) || !(opt.Step > 0) || !(opt.Band > 0) || !(radius > 0) {
		return PlateAxisFit{}, fmt.Errorf("reconstruct: plate axis options and radius must be positive: %+v, radius %g", opt, radius)
	}
	n := int(math.Ceil(radius / opt.Cell))
	if n > maxPlateCells {
		return PlateAxisFit{}, fmt.Errorf("reconstruct: a %.0f mm plate at %.2g mm cells needs more than %d cells a side", radius*2000, opt.Cell*1000, 2*maxPlateCells+1)
	}
	// Plate-plane basis with u × v = up, so that a turn by a right-handed
	// about up is the usual counter-clockwise rotation of (u, v).
	u := mesh.Normalize(r3.Cross(up, r3.Vec{X: 1}))
	if u == (r3.Vec{}) {
		u = mesh.Normalize(r3.Cross(up, r3.Vec{Y: 1}))
	}
	v := r3.Cross(up, u)
	origin := r3.Sub(start, r3.Scale(plate.Distance(start), up))
	imgs := make([]plateImage, len(views))
	for i, vw := range views {
		if err := vw.Intr.Validate(); err != nil {
			return PlateAxisFit{}, fmt.Errorf("reconstruct: plate view %d: %w", i, err)
		}
		if len(vw.Depth) != vw.Intr.Width*vw.Intr.Height || vw.Color == nil ||
			vw.Color.Rect.Dx() != vw.Intr.Width || vw.Color.Rect.Dy() != vw.Intr.Height {
			return PlateAxisFit{}, fmt.Errorf("reconstruct: plate view %d: depth and colour do not match the %d×%d intrinsics", i, vw.Intr.Width, vw.Intr.Height)
		}
	}
	par.For(len(views), 0, func(i int) {
		imgs[i] = resamplePlate(views[i], plate, origin, u, v, n, opt)
	})
	cs := make([]float64, len(views))
	sn := make([]float64, len(views))
	for j := 1; j < len(views); j++ {
		cs[j], sn[j] = math.Cos(views[j].Angle), math.Sin(views[j].Angle)
	}
	score := func(a, b float64, stride int) (float64, int) {
		ncc := make([]float64, len(views))
		cnt := make([]int, len(views))
		par.For(len(views)-1, 0, func(k int) {
			j := k + 1
			ncc[j], cnt[j] = plateCorrelation(&imgs[0], &imgs[j], cs[j], sn[j], a, b, stride)
		})
		var s float64
		var c int
		for j := 1; j < len(views); j++ {
			if cnt[j] >= opt.MinCells {
				s += ncc[j] * float64(cnt[j])
				c += cnt[j]
			}
		}
		if c == 0 {
			return math.Inf(-1), 0
		}
		return s / float64(c), c
	}
	fit := PlateAxisFit{}
	var ca, cb float64
	step := opt.Range / 2
	// Steps of several cells compare every fourth cell, steps over a
	// quarter of a cell every second: the coarser levels only have to
	// land in the right basin for the next.
	stride := func(step float64) int {
		switch {
		case step >= 2*opt.Cell:
			return 4
		case step >= opt.Cell/4:
			return 2
		}
		return 1
	}
	best, cells := score(0, 0, stride(step))
	fit.Evaluations++
	for {
		ba, bb := ca, cb
		if stride(step) != stride(3*step) {
			best, cells = score(ca, cb, stride(step)) // rescore the centre at the finer sampling
			fit.Evaluations++
		}
		for i := -2; i <= 2; i++ {
			for j := -2; j <= 2; j++ {
				if i == 0 && j == 0 {
					continue
				}
				a, b := ca+float64(i)*step, cb+float64(j)*step
				if math.Abs(a) > opt.Range || math.Abs(b) > opt.Range {
					continue
				}
				s, c := score(a, b, stride(step))
				fit.Evaluations++
				if s > best {
					ba, bb, best, cells = a, b, s, c
				}
			}
		}
		ca, cb = ba, bb
		if step <= opt.Step {
			break
		}
		step = math.Max(opt.Step, step/3)
	}
	fit.Point = r3.Add(origin, r3.Add(r3.Scale(ca, u), r3.Scale(cb, v)))
	fit.Correlation, fit.Cells = best, cells
	edge := opt.Range - 2*opt.Step
	switch {
	case cells == 0:
		return fit, fmt.Errorf("%w: no two views share %d plate cells", ErrWeakTexture, opt.MinCells)
	case best < opt.MinCorrelation:
		return fit, fmt.Errorf("%w: best correlation %.2f, below %.2f", ErrWeakTexture, best, opt.MinCorrelation)
	case math.Abs(ca) >= edge || math.Abs(cb) >= edge:
		return fit, fmt.Errorf("%w: the best point lies on the edge of the %.0f mm search", ErrWeakTexture, opt.Range*1000)
	}
	return fit, nil
}

// maxPlateCells bounds the plate image's half-size in cells.
const maxPlateCells = 1000

// plateImage is a view's plate resampled on a (2n+1)² grid of cells in
// the plate's plane, centred on the search origin; NaN marks a cell
// that does not show the plate.
type plateImage struct {
	n    int
	cell float64
	lum  []float32
	// cells lists the cells that show the plate: plane coordinates
	// (metres) and luminance.
	cells []plateCell
}

type plateCell struct{ x, y, lum float64 }

func (p *plateImage) at(i, j int) float32 { return p.lum[(j+p.n)*(2*p.n+1)+i+p.n] }

// sample reads the plate image bilinearly at plane coordinates (x, y)
// (metres from the origin); ok is false off the grid or next to a cell
// without the plate.
func (p *plateImage) sample(x, y float64) (float64, bool) {
	fx, fy := x/p.cell, y/p.cell
	i0, j0 := int(math.Floor(fx)), int(math.Floor(fy))
	if i0 < -p.n || j0 < -p.n || i0+1 > p.n || j0+1 > p.n {
		return 0, false
	}
	a, b, c, d := p.at(i0, j0), p.at(i0+1, j0), p.at(i0, j0+1), p.at(i0+1, j0+1)
	if a != a || b != b || c != c || d != d {
		return 0, false
	}
	tx, ty := fx-float64(i0), fy-float64(j0)
	top := float64(a)*(1-tx) + float64(b)*tx
	bot := float64(c)*(1-tx) + float64(d)*tx
	return top*(1-ty) + bot*ty, true
}

// resamplePlate projects every cell's centre on the plate into the
// view and reads the colour image's luminance (Luminance) there
// bilinearly, keeping the cell when the depth at the nearest pixel
// lies within Band of the plane.
func resamplePlate(vw PlateView, plate Plane, origin, u, v r3.Vec, n int, opt PlateAxisOptions) plateImage {
	side := 2*n + 1
	img := plateImage{n: n, cell: opt.Cell, lum: make([]float32, side*side)}
	w, h := vw.Intr.Width, vw.Intr.Height
	nan := float32(math.NaN())
	l := Luminance(vw.Color, nil)
	lum := func(x, y int) float64 { return float64(l[y*w+x]) }
	r2 := float64(n) * float64(n)
	for j := -n; j <= n; j++ {
		for i := -n; i <= n; i++ {
			k := (j+n)*side + i + n
			img.lum[k] = nan
			if float64(i*i+j*j) > r2 {
				continue
			}
			x := r3.Add(origin, r3.Add(r3.Scale(float64(i)*opt.Cell, u), r3.Scale(float64(j)*opt.Cell, v)))
			if x.Z <= 0 {
				continue
			}
			uf, vf := vw.Intr.Project(x)
			x0, y0 := int(math.Floor(uf)), int(math.Floor(vf))
			if x0 < 0 || y0 < 0 || x0+1 >= w || y0+1 >= h {
				continue
			}
			px, py := int(math.Round(uf)), int(math.Round(vf))
			z := vw.Depth[py*w+px]
			if z <= 0 {
				continue
			}
			if d := plate.Distance(vw.Intr.BackProject(float64(px), float64(py), float64(z))); math.Abs(d) > opt.Band {
				continue
			}
			tx, ty := uf-float64(x0), vf-float64(y0)
			top := lum(x0, y0)*(1-tx) + lum(x0+1, y0)*tx
			bot := lum(x0, y0+1)*(1-tx) + lum(x0+1, y0+1)*tx
			img.lum[k] = float32(top*(1-ty) + bot*ty)
			img.cells = append(img.cells, plateCell{float64(i) * opt.Cell, float64(j) * opt.Cell, float64(img.lum[k])})
		}
	}
	return img
}

// plateCorrelation is the normalised cross-correlation between view
// image b and the reference image a turned by (cos, sin) about the
// trial point (ca, cb): b's cell at q shows what a showed at
// R⁻¹(q − c) + c. Every stride-th of b's cells is used.
func plateCorrelation(a, b *plateImage, cos, sin, ca, cb float64, stride int) (float64, int) {
	var sx, sy, sxx, syy, sxy float64
	cnt := 0
	// R⁻¹(q − c) + c = R⁻¹q + (c − R⁻¹c).
	ox, oy := ca-(cos*ca+sin*cb), cb-(-sin*ca+cos*cb)
	for k := 0; k < len(b.cells); k += stride {
		q := &b.cells[k]
		x, ok := a.sample(cos*q.x+sin*q.y+ox, -sin*q.x+cos*q.y+oy)
		if !ok {
			continue
		}
		y := q.lum
		sx += x
		sy += y
		sxx += x * x
		syy += y * y
		sxy += x * y
		cnt++
	}
	if cnt < 2 {
		return 0, 0
	}
	nf := float64(cnt)
	vx, vy := sxx-sx*sx/nf, syy-sy*sy/nf
	if !(vx > 0 && vy > 0) {
		return 0, 0
	}
	return (sxy - sx*sy/nf) / math.Sqrt(vx*vy), cnt * stride
}
