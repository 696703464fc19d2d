package validate

import (
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"sort"

	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"
	"gonum.org/v1/gonum/spatial/r3"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// PictureOptions tunes the report pictures.
type PictureOptions struct {
	// Tile is the side (pixels) of each view of a six-sided picture.
	// DEFAULT: 240
	Tile int
	// Thumb is the width (pixels) of a contact-sheet thumbnail.
	// DEFAULT: 200
	Thumb int
	// Columns is the number of thumbnails per contact-sheet row.
	// DEFAULT: 4
	Columns int
	// MaxThumbs bounds the thumbnails of a contact sheet (the first
	// ones are kept, wrong ones before right ones).
	// DEFAULT: 48
	MaxThumbs int
	// Background is the colour behind the model.
	// DEFAULT: (238, 238, 238)
	Background mesh.RGB
	// ModelColor is the albedo of a mesh without vertex colours.
	// DEFAULT: (180, 180, 185)
	ModelColor mesh.RGB
}

// DefaultPictureOptions returns the documented defaults.
func DefaultPictureOptions() PictureOptions {
	return PictureOptions{
		Tile: 240, Thumb: 200, Columns: 4, MaxThumbs: 48,
		Background: mesh.RGB{R: 238, G: 238, B: 238},
		ModelColor: mesh.RGB{R: 180, G: 180, B: 185},
	}
}

func (o PictureOptions) validate() error {
	switch {
	case o.Tile < 32 || o.Tile > 2048:
		return fmt.Errorf("validate: picture tile %d px, want 32…2048", o.Tile)
	case o.Thumb < 32 || o.Thumb > 2048:
		return fmt.Errorf("validate: thumbnail width %d px, want 32…2048", o.Thumb)
	case o.Columns < 1 || o.Columns > 64:
		return fmt.Errorf("validate: contact sheet columns %d, want 1…64", o.Columns)
	case o.MaxThumbs < 1:
		return fmt.Errorf("validate: contact sheet of %d thumbnails", o.MaxThumbs)
	}
	return nil
}

// Colours of the pictures.
var (
	picRight  = color.NRGBA{R: 0, G: 170, B: 60, A: 255}  // right pose: solid green outline
	picWrong  = color.NRGBA{R: 220, G: 20, B: 60, A: 255} // wrong pose: dashed red outline
	picText   = color.NRGBA{R: 30, G: 30, B: 30, A: 255}
	picUnseen = mesh.RGB{R: 255, G: 0, B: 200} // never seen: magenta, outside the seen ramp
)

// sixSides are the six viewing directions (from the model towards the
// camera) with their labels and image-up directions.
var sixSides = []struct {
	label   string
	dir, up r3.Vec
}{
	{"front (-y)", r3.Vec{Y: -1}, r3.Vec{Z: 1}},
	{"right (+x)", r3.Vec{X: 1}, r3.Vec{Z: 1}},
	{"top (+z)", r3.Vec{Z: 1}, r3.Vec{Y: 1}},
	{"back (+y)", r3.Vec{Y: 1}, r3.Vec{Z: 1}},
	{"left (-x)", r3.Vec{X: -1}, r3.Vec{Z: 1}},
	{"bottom (-z)", r3.Vec{Z: -1}, r3.Vec{Y: -1}},
}

// SixSides renders m from the six axis directions into one image of
// 3×2 labelled tiles. Each camera is a pinhole with a 30° field of view
// at the distance where the bounding sphere (around the box centre,
// radius half the box diagonal) fills it, which is nearly orthographic;
// the light is the renderer's default, fixed to the camera. A mesh
// without colours is drawn in opt.ModelColor.
func SixSides(m *mesh.Mesh, opt PictureOptions) (*image.NRGBA, error) {
	if err := opt.validate(); err != nil {
		return nil, err
	}
	if m == nil || len(m.Faces) == 0 {
		return nil, errors.New("validate: six sides of an empty mesh")
	}
	box := m.Bounds()
	if box.Empty() {
		return nil, fmt.Errorf("validate: six sides of a mesh without finite vertices: %w", mesh.ErrDegenerate)
	}
	centre, radius := box.Center(), box.Diagonal()/2
	if !(radius > 0) {
		radius = 1e-3
	}
	t := opt.Tile
	const fov = 30 * math.Pi / 180
	f := float64(t) / (2 * math.Tan(fov/2))
	intr := mesh.Intrinsics{Width: t, Height: t, Fx: f, Fy: f, Cx: float64(t-1) / 2, Cy: float64(t-1) / 2}
	dist := radius / math.Sin(fov/2) * 1.05
	r, err := render.NewRenderer(intr)
	if err != nil {
		return nil, err
	}
	ropt := render.DefaultOptions()
	ropt.Background = opt.Background
	ropt.Near = math.Max(1e-4, dist-1.5*radius)
	ropt.Far = dist + 1.5*radius
	out := image.NewNRGBA(image.Rect(0, 0, 3*t, 2*t+2*14))
	fillRect(out, out.Bounds(), toNRGBA(opt.Background))
	var fr render.Frame
	for i, s := range sixSides {
		camToWorld, err := mesh.LookAt(r3.Add(centre, r3.Scale(dist, s.dir)), centre, s.up)
		if err != nil {
			return nil, err
		}
		if err := r.RenderInto(&fr, []render.Object{{Mesh: m, ModelToCam: camToWorld.Inv(), Color: opt.ModelColor}}, ropt); err != nil {
			return nil, err
		}
		x0, y0 := (i%3)*t, (i/3)*(t+14)
		blit(out, fr.Color, x0, y0+14)
		drawText(out, x0+4, y0+11, s.label, picText)
	}
	return out, nil
}

// flatColored returns a copy of m with every face given its own three
// vertices coloured col(face), so each face is drawn in one colour.
func flatColored(m *mesh.Mesh, col func(face int) mesh.RGB) *mesh.Mesh {
	out := &mesh.Mesh{
		Vertices: make([]r3.Vec, 0, 3*len(m.Faces)),
		Colors:   make([]mesh.RGB, 0, 3*len(m.Faces)),
		Faces:    make([]mesh.Face, len(m.Faces)),
	}
	for i, f := range m.Faces {
		c := col(i)
		n := uint32(len(out.Vertices))
		out.Vertices = append(out.Vertices, m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]])
		out.Colors = append(out.Colors, c, c, c)
		out.Faces[i] = mesh.Face{n, n + 1, n + 2}
	}
	return out
}

// CoverageColor is the colour of a face seen in views frames on a map
// whose ramp ends at full views: magenta for never seen, then a
// sequential ramp from yellow (seen once) through green to dark blue
// (seen full times or more), so the warning colour stands apart from
// every seen count (common practice for sequential data with a flagged
// zero).
func CoverageColor(views, full int) mesh.RGB {
	if views <= 0 {
		return picUnseen
	}
	stops := []mesh.RGB{{R: 250, G: 230, B: 40}, {R: 90, G: 200, B: 100}, {R: 30, G: 140, B: 140}, {R: 40, G: 60, B: 140}}
	if full <= 1 {
		return stops[len(stops)-1]
	}
	return rampColor(stops, float64(views-1)/float64(full-1))
}

// CoverageMap renders m from six sides with every face coloured by the
// number of frames that saw it (CoverageColor, ramp ending at the 90th
// percentile of the seen faces' counts, at least 2), with a legend.
func CoverageMap(m *mesh.Mesh, cov *Coverage, opt PictureOptions) (*image.NRGBA, error) {
	if cov == nil || len(cov.FaceViews) != len(m.Faces) {
		return nil, errors.New("validate: coverage map needs the coverage of this mesh")
	}
	var seen []int
	for _, v := range cov.FaceViews {
		if v > 0 {
			seen = append(seen, int(v))
		}
	}
	full := 2
	if len(seen) > 0 {
		sort.Ints(seen)
		full = max(2, seen[(len(seen)*9)/10])
	}
	flat := flatColored(m, func(i int) mesh.RGB { return CoverageColor(int(cov.FaceViews[i]), full) })
	img, err := SixSides(flat, opt)
	if err != nil {
		return nil, err
	}
	// Legend below: a swatch per count class.
	out := growDown(img, 40, opt.Background)
	y := img.Bounds().Dy() + 8
	x := 6
	swatch := func(c mesh.RGB, label string) {
		fillRect(out, image.Rect(x, y, x+16, y+16), toNRGBA(c))
		drawText(out, x+20, y+12, label, picText)
		x += 24 + 7*len(label) + 12
	}
	swatch(picUnseen, "never seen")
	swatch(CoverageColor(1, full), "1 view")
	if full > 2 {
		swatch(CoverageColor((1+full)/2, full), fmt.Sprintf("%d views", (1+full)/2))
	}
	swatch(CoverageColor(full, full), fmt.Sprintf("%d+ views", full))
	return out, nil
}

// DeviationMap renders the comparison's aligned scan from six sides in
// its heat-map colours (DeviationColor) with a colour bar from
// −DeviationRange to +DeviationRange below.
func DeviationMap(c *Comparison, opt PictureOptions) (*image.NRGBA, error) {
	if c == nil || c.AlignedScan == nil || len(c.AlignedScan.Colors) != len(c.AlignedScan.Vertices) {
		return nil, errors.New("validate: deviation map needs a comparison with a coloured aligned scan")
	}
	img, err := SixSides(c.AlignedScan, opt)
	if err != nil {
		return nil, err
	}
	out := growDown(img, 44, opt.Background)
	w := out.Bounds().Dx()
	y := img.Bounds().Dy() + 6
	x0, x1 := 40, w-40
	for x := x0; x < x1; x++ {
		d := (2*float64(x-x0)/float64(x1-x0-1) - 1) * c.DeviationRange
		fillRect(out, image.Rect(x, y, x+1, y+16), toNRGBA(DeviationColor(d, c.DeviationRange)))
	}
	mm := c.DeviationRange * 1e3
	drawText(out, x0, y+30, fmt.Sprintf("-%.2g mm (inside)", mm), picText)
	mid := "0"
	drawText(out, (x0+x1)/2-3, y+30, mid, picText)
	right := fmt.Sprintf("+%.2g mm (outside)", mm)
	drawText(out, x1-7*len(right), y+30, right, picText)
	return out, nil
}

// CheckView is one synthetic check view for the contact sheet.
type CheckView struct {
	// Image is the view's colour image; nil draws a blank tile.
	Image image.Image
	// Intr is the camera the view was rendered with.
	Intr mesh.Intrinsics
	// Model is the model drawn under the hypothesis (nil: the sheet's
	// model), and ModelToCam the chosen hypothesis.
	Model      *mesh.Mesh
	ModelToCam mesh.Pose
	// Correct reports that the chosen hypothesis was a right pose.
	Correct bool
	// Label is printed under the thumbnail.
	Label string
}

// ContactSheet draws the check views as a grid of thumbnails, each with
// the outline of the model under the chosen hypothesis: rendered at the
// thumbnail's resolution, its silhouette's boundary is drawn solid green
// for a right pose and dashed red for a wrong one (two cues, so the
// difference does not rest on colour alone), and the tile is framed the
// same way. Wrong views come first; at most opt.MaxThumbs are drawn.
func ContactSheet(views []CheckView, model *mesh.Mesh, opt PictureOptions) (*image.NRGBA, error) {
	if err := opt.validate(); err != nil {
		return nil, err
	}
	if len(views) == 0 {
		return nil, errors.New("validate: contact sheet without views")
	}
	order := make([]int, len(views))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return !views[order[a]].Correct && views[order[b]].Correct })
	if len(order) > opt.MaxThumbs {
		order = order[:opt.MaxThumbs]
	}
	tw := opt.Thumb
	// Tile height from the first view's aspect ratio.
	th := tw * 3 / 4
	if k := views[order[0]].Intr; k.Width > 0 && k.Height > 0 {
		th = max(16, tw*k.Height/k.Width)
	}
	const labelH = 16
	cols := min(opt.Columns, len(order))
	rows := (len(order) + cols - 1) / cols
	pad := 6
	out := image.NewNRGBA(image.Rect(0, 0, cols*(tw+pad)+pad, rows*(th+labelH+pad)+pad))
	fillRect(out, out.Bounds(), color.NRGBA{R: 255, G: 255, B: 255, A: 255})
	var r *render.Renderer
	var fr render.Frame
	for slot, vi := range order {
		v := views[vi]
		if err := v.Intr.Validate(); err != nil {
			return nil, fmt.Errorf("validate: contact sheet view %d: %w", vi, err)
		}
		m := v.Model
		if m == nil {
			m = model
		}
		if m == nil {
			return nil, fmt.Errorf("validate: contact sheet view %d has no model", vi)
		}
		x0 := pad + (slot%cols)*(tw+pad)
		y0 := pad + (slot/cols)*(th+labelH+pad)
		tile := image.NewNRGBA(image.Rect(0, 0, tw, th))
		fillRect(tile, tile.Bounds(), color.NRGBA{R: 60, G: 60, B: 60, A: 255})
		if v.Image != nil {
			scaleInto(tile, v.Image)
		}
		// The model under the hypothesis at the thumbnail's resolution:
		// pixel centres scale as (u + 0.5)·k − 0.5 (mesh.Intrinsics).
		kx, ky := float64(tw)/float64(v.Intr.Width), float64(th)/float64(v.Intr.Height)
		ti := mesh.Intrinsics{Width: tw, Height: th, Fx: v.Intr.Fx * kx, Fy: v.Intr.Fy * ky,
			Cx: (v.Intr.Cx+0.5)*kx - 0.5, Cy: (v.Intr.Cy+0.5)*ky - 0.5}
		// The renderer's camera is fixed at creation: make one per
		// distinct thumbnail camera.
		if r == nil || r.Intrinsics() != ti {
			var err error
			if r, err = render.NewRenderer(ti); err != nil {
				return nil, err
			}
		}
		if err := checkPose(v.ModelToCam); err != nil {
			return nil, fmt.Errorf("validate: contact sheet view %d: hypothesis: %w", vi, err)
		}
		if err := r.RenderInto(&fr, []render.Object{{Mesh: m, ModelToCam: v.ModelToCam}}, render.DefaultOptions()); err != nil {
			return nil, err
		}
		col := picRight
		if !v.Correct {
			col = picWrong
		}
		drawOutline(tile, fr.Object, tw, th, col, !v.Correct)
		blit(out, tile, x0, y0)
		frame := image.Rect(x0-2, y0-2, x0+tw+2, y0+th+2)
		drawFrame(out, frame, col, !v.Correct)
		mark := "RIGHT"
		if !v.Correct {
			mark = "WRONG"
		}
		label := fmt.Sprintf("#%d %s %s", vi, mark, v.Label)
		if max := tw / 7; len(label) > max {
			label = label[:max]
		}
		drawText(out, x0, y0+th+13, label, picText)
	}
	return out, nil
}

// drawOutline marks the pixels of the object mask (Object ≥ 0) that
// border a pixel outside it (or the image edge), thickened by one pixel
// inward; dashed skips every other run of three pixels along x+y.
func drawOutline(img *image.NRGBA, obj []int32, w, h int, c color.NRGBA, dashed bool) {
	in := func(x, y int) bool { return x >= 0 && y >= 0 && x < w && y < h && obj[y*w+x] >= 0 }
	edge := make([]bool, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			if in(x, y) && (!in(x-1, y) || !in(x+1, y) || !in(x, y-1) || !in(x, y+1)) {
				edge[y*w+x] = true
			}
		}
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			on := edge[y*w+x] ||
				(in(x, y) && ((x > 0 && edge[y*w+x-1]) || (x+1 < w && edge[y*w+x+1]) ||
					(y > 0 && edge[(y-1)*w+x]) || (y+1 < h && edge[(y+1)*w+x])))
			if !on || (dashed && ((x+y)/3)%2 == 1) {
				continue
			}
			img.SetNRGBA(x, y, c)
		}
	}
}

// drawFrame draws a 2-pixel rectangle outline, dashed when asked.
func drawFrame(img *image.NRGBA, r image.Rectangle, c color.NRGBA, dashed bool) {
	set := func(x, y, along int) {
		if dashed && (along/4)%2 == 1 {
			return
		}
		if (image.Point{X: x, Y: y}).In(img.Bounds()) {
			img.SetNRGBA(x, y, c)
		}
	}
	for x := r.Min.X; x < r.Max.X; x++ {
		for k := 0; k < 2; k++ {
			set(x, r.Min.Y+k, x)
			set(x, r.Max.Y-1-k, x)
		}
	}
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for k := 0; k < 2; k++ {
			set(r.Min.X+k, y, y)
			set(r.Max.X-1-k, y, y)
		}
	}
}

// ScoreHistogram plots the scores of right and wrong hypotheses of one
// scorer on shared bins (20 between the smallest and largest score),
// with the threshold as a vertical line, as a w×h-pixel image (gonum
// plot drawn on a vgimg canvas at 96 dpi).
func ScoreHistogram(s ScorerResult, w, h int) (image.Image, error) {
	all := append(append([]float64(nil), s.RightScores...), s.WrongScores...)
	if len(all) == 0 {
		return nil, fmt.Errorf("validate: scorer %q has no scores to plot", s.Name)
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range append(all, s.Threshold) {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("validate: scorer %q has a score that is not finite", s.Name)
		}
		lo, hi = math.Min(lo, v), math.Max(hi, v)
	}
	if hi == lo {
		lo, hi = lo-0.5, hi+0.5
	}
	const nbins = 20
	width := (hi - lo) / nbins
	bins := func(vals []float64) []plotter.HistogramBin {
		b := make([]plotter.HistogramBin, nbins)
		for i := range b {
			b[i].Min = lo + float64(i)*width
			b[i].Max = b[i].Min + width
		}
		for _, v := range vals {
			k := min(nbins-1, int((v-lo)/width))
			b[k].Weight++
		}
		return b
	}
	p := plot.New()
	p.Title.Text = s.Name
	p.X.Label.Text = "score"
	p.Y.Label.Text = "hypotheses"
	var top float64
	for _, set := range []struct {
		vals []float64
		c    color.NRGBA
		name string
	}{{s.WrongScores, color.NRGBA{R: 220, G: 20, B: 60, A: 140}, "wrong pose"}, {s.RightScores, color.NRGBA{R: 0, G: 170, B: 60, A: 140}, "right pose"}} {
		if len(set.vals) == 0 {
			continue
		}
		hb := bins(set.vals)
		for _, b := range hb {
			top = math.Max(top, b.Weight)
		}
		hist := &plotter.Histogram{Bins: hb, Width: width, FillColor: set.c, LineStyle: plotter.DefaultLineStyle}
		hist.LineStyle.Color = set.c
		p.Add(hist)
		p.Legend.Add(fmt.Sprintf("%s (%d)", set.name, len(set.vals)), hist)
	}
	line, err := plotter.NewLine(plotter.XYs{{X: s.Threshold, Y: 0}, {X: s.Threshold, Y: top * 1.05}})
	if err != nil {
		return nil, err
	}
	line.LineStyle.Width = vg.Points(1.5)
	line.LineStyle.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
	p.Add(line)
	p.Legend.Add(fmt.Sprintf("threshold %.3g", s.Threshold), line)
	p.Legend.Top = true
	p.Legend.XOffs = -vg.Points(6)
	p.Legend.YOffs = -vg.Points(4)
	p.Y.Min, p.Y.Max = 0, top*1.35 // headroom for the legend
	c := vgimg.NewWith(vgimg.UseWH(vg.Length(w)*vg.Inch/96, vg.Length(h)*vg.Inch/96), vgimg.UseDPI(96))
	p.Draw(draw.New(c))
	return c.Image(), nil
}

// EncodePNG writes img as PNG.
func EncodePNG(w io.Writer, img image.Image) error {
	if err := png.Encode(w, img); err != nil {
		return fmt.Errorf("validate: PNG: %w", err)
	}
	return nil
}

// ---------------------------------------------------------------------
// Small raster helpers
// ---------------------------------------------------------------------

func toNRGBA(c mesh.RGB) color.NRGBA { return color.NRGBA{R: c.R, G: c.G, B: c.B, A: 255} }

func fillRect(img *image.NRGBA, r image.Rectangle, c color.NRGBA) {
	r = r.Intersect(img.Bounds())
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			img.SetNRGBA(x, y, c)
		}
	}
}

// blit copies src into dst with src's top-left corner at (x0, y0).
func blit(dst *image.NRGBA, src image.Image, x0, y0 int) {
	b := src.Bounds()
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			p := image.Point{X: x0 + x - b.Min.X, Y: y0 + y - b.Min.Y}
			if p.In(dst.Bounds()) {
				dst.Set(p.X, p.Y, src.At(x, y))
			}
		}
	}
}

// growDown returns img with extra rows of background below.
func growDown(img *image.NRGBA, extra int, bg mesh.RGB) *image.NRGBA {
	b := img.Bounds()
	out := image.NewNRGBA(image.Rect(0, 0, b.Dx(), b.Dy()+extra))
	fillRect(out, out.Bounds(), toNRGBA(bg))
	blit(out, img, 0, 0)
	return out
}

// scaleInto resamples src to fill dst by averaging the source pixels
// under each destination pixel (a box filter).
func scaleInto(dst *image.NRGBA, src image.Image) {
	sb, db := src.Bounds(), dst.Bounds()
	sx := float64(sb.Dx()) / float64(db.Dx())
	sy := float64(sb.Dy()) / float64(db.Dy())
	for y := 0; y < db.Dy(); y++ {
		y0, y1 := int(float64(y)*sy), max(int(float64(y)*sy)+1, int(float64(y+1)*sy))
		for x := 0; x < db.Dx(); x++ {
			x0, x1 := int(float64(x)*sx), max(int(float64(x)*sx)+1, int(float64(x+1)*sx))
			var r, g, b, n uint32
			for yy := y0; yy < min(y1, sb.Dy()); yy++ {
				for xx := x0; xx < min(x1, sb.Dx()); xx++ {
					c := color.NRGBAModel.Convert(src.At(sb.Min.X+xx, sb.Min.Y+yy)).(color.NRGBA)
					r, g, b, n = r+uint32(c.R), g+uint32(c.G), b+uint32(c.B), n+1
				}
			}
			if n > 0 {
				dst.SetNRGBA(db.Min.X+x, db.Min.Y+y, color.NRGBA{R: uint8(r / n), G: uint8(g / n), B: uint8(b / n), A: 255})
			}
		}
	}
}

// drawText writes s (ASCII) with its baseline at (x, y) in the 7×13
// fixed font of golang.org/x/image/font/basicfont.
func drawText(img *image.NRGBA, x, y int, s string, c color.NRGBA) {
	d := font.Drawer{Dst: img, Src: image.NewUniform(c), Face: basicfont.Face7x13, Dot: fixed.P(x, y)}
	d.DrawString(s)
}
