package reconstruct

import (
	"image"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Luminance writes the Rec. 601 luminance of img (0–255) into dst,
// row-major, and returns it; dst is reused when it has the right size.
func Luminance(img *image.NRGBA, dst []float32) []float32 {
	w, h := img.Rect.Dx(), img.Rect.Dy()
	if len(dst) != w*h {
		dst = make([]float32, w*h)
	}
	for y := 0; y < h; y++ {
		row := img.Pix[(y)*img.Stride : (y)*img.Stride+4*w]
		for x := 0; x < w; x++ {
			p := row[4*x : 4*x+3 : 4*x+3]
			dst[y*w+x] = 0.299*float32(p[0]) + 0.587*float32(p[1]) + 0.114*float32(p[2])
		}
	}
	return dst
}

// keyframe is the view the tracker's colour term aligns each new frame
// with: its pose and, per pyramid level, its luminance, depth and the
// luminance's gradient.
type keyframe struct {
	camToWorld mesh.Pose
	levels     [pyramidLevels]keyLevel
}

type keyLevel struct {
	intr  mesh.Intrinsics
	lum   []float32
	depth []float32
	// pix packs per pixel what the colour term reads (one load of
	// neighbouring memory for the four pixels it interpolates).
	pix []keyPixel
}

// keyPixel is one keyframe pixel as the colour term reads it: its
// luminance, the luminance's central-difference gradient and its depth.
// depth is positive only where the gradient exists (the pixel and its
// four neighbours have depth) and −1 elsewhere (16 bytes a pixel, four
// to a cache line, rather than 20 with a flag; alone, that did not
// measurably change the cost of the colour term's loads, which
// colourTerm.addRange overlaps).
type keyPixel struct {
	lum, gx, gy, depth float32
}

// downLuminance halves a luminance image over the pixels whose depth
// the depth pyramid kept (depth of the coarser level > 0), averaging
// the 2×2 block's pixels with depth. Rows are shared among workers
// goroutines (0: all cores).
func downLuminance(src []float32, srcDepth []float32, sw, sh int, dst []float32, workers int) {
	dw, dh := sw/2, sh/2
	forRows(dh, workers, func(y int) {
		for x := 0; x < dw; x++ {
			var s float32
			n := 0
			for k := 0; k < 4; k++ {
				i := (2*y+k/2)*sw + 2*x + k%2
				if srcDepth[i] > 0 {
					s += src[i]
					n++
				}
			}
			if n > 0 {
				dst[y*dw+x] = s / float32(n)
			} else {
				dst[y*dw+x] = 0
			}
		}
	})
}

// SetKeyframe makes the frame (its luminance, Luminance's layout, and
// depth) placed at camToWorld the one the colour term aligns new frames
// with.
func (t *Tracker) SetKeyframe(lum, depth []float32, camToWorld mesh.Pose) {
	if t.key == nil {
		t.key = &keyframe{}
		for l := 0; l < pyramidLevels; l++ {
			li := t.intr.Scaled(1 << l)
			n := li.Width * li.Height
			t.key.levels[l] = keyLevel{intr: li, lum: make([]float32, n), depth: make([]float32, n), pix: make([]keyPixel, n)}
		}
	}
	k := t.key
	k.camToWorld = camToWorld
	copy(k.levels[0].depth, depth)
	copy(k.levels[0].lum, lum)
	for l := 1; l < pyramidLevels; l++ {
		src, dst := &k.levels[l-1], &k.levels[l]
		downDepth(src.depth, src.intr.Width, dst.depth, dst.intr.Width, dst.intr.Height, t.opt.Workers)
		downLuminance(src.lum, src.depth, src.intr.Width, src.intr.Height, dst.lum, t.opt.Workers)
	}
	for l := range k.levels {
		kl := &k.levels[l]
		w, h := kl.intr.Width, kl.intr.Height
		forRows(h, t.opt.Workers, func(y int) {
			for x := 0; x < w; x++ {
				i := y*w + x
				kl.pix[i] = keyPixel{lum: kl.lum[i], depth: -1}
				if x == 0 || y == 0 || x == w-1 || y == h-1 {
					continue
				}
				if kl.depth[i] <= 0 || kl.depth[i-1] <= 0 || kl.depth[i+1] <= 0 || kl.depth[i-w] <= 0 || kl.depth[i+w] <= 0 {
					continue
				}
				kl.pix[i].gx = (kl.lum[i+1] - kl.lum[i-1]) / 2
				kl.pix[i].gy = (kl.lum[i+w] - kl.lum[i-w]) / 2
				kl.pix[i].depth = kl.depth[i]
			}
		})
	}
}

// colourTerm adds the colour term of one tracking pass: every sample
// of the new frame, moved by camToWorld into the keyframe, is compared
// with the keyframe's luminance there (bilinear, with its gradient),
// after an affine gain a·I + b fitted to the previous iteration's pairs
// takes out the frame's exposure and light changes. The residual
// a·I_key(π(p)) + b − I_new is linearised in the point's motion through
// the keyframe's projection (direct RGB-D alignment: Steinbrücker,
// Sturm & Cremers 2011, "Real-time visual odometry from dense RGB-D
// images", ICCV Workshops, DOI 10.1109/ICCVW.2011.6130321), weighted so
// that a residual of ColorSigma counts like a depth residual of the
// reference axial noise, with Huber weights beyond 2·ColorSigma
// (occlusions, highlights). Each band sums its pairs' luminances for
// the next gain fit and counts its candidates and pairs (the share that
// paired is the keyframe overlap).
type colourTerm struct {
	kl       *keyLevel
	camToKey affine
	keyR     affine
	w0       float64
	huber    float64
	a, b     float64
}

// colourTerm returns the colour term of level l at camToWorld, for
// every step-th sample (each weighing step times more).
func (t *Tracker) colourTerm(l int, camToWorld mesh.Pose, gain [2]float64, step int) colourTerm {
	refSigma := axialSigma(0.5, 0)
	sigma := t.opt.ColorSigma
	return colourTerm{
		kl:       &t.key.levels[l],
		camToKey: newAffine(t.key.camToWorld.Inv().Mul(camToWorld)),
		keyR:     newAffine(mesh.Pose{R: t.key.camToWorld.R}),
		w0:       float64(step) * refSigma * refSigma / (sigma * sigma),
		huber:    2 * sigma,
		a:        gain[0],
		b:        gain[1],
	}
}

// colourChunk is how many samples addRange projects before it reads
// the keyframe for them.
const colourChunk = 64

// colourHit is a sample whose four keyframe pixels all have a
// gradient: its index, its point in the keyframe's camera, its
// projection there and the index of the projection's top-left pixel.
type colourHit struct {
	si     int32
	j      int32
	uf, vf float64
	pk     r3.Vec
}

// addRange adds every step-th sample of samples[from:to] (from a
// multiple of step), each moved to the world by cw, to pt. It works in
// chunks of colourChunk samples: first it projects each into the
// keyframe and tests its four pixels, then it adds the ones that pass.
// The first loop's loads of the keyframe do not wait on one another,
// so they overlap; interleaved with the sums, each waited for the one
// before (the keyframe at full resolution is 4.9 MB, and this load was
// a third of the tracker's time). The sums are added in sample order,
// as one loop would.
func (c *colourTerm) addRange(pt *photoPart, samples []trackSample, from, to, step int, cw *affine) {
	ki := &c.kl.intr
	kw, kh := ki.Width, ki.Height
	pix := c.kl.pix
	var hits [colourChunk]colourHit
	for si := from; si < to; {
		n := 0
		for ; si < to && n < colourChunk; si += step {
			pk := c.camToKey.apply(samples[si].v)
			if pk.Z <= 0 {
				continue
			}
			pt.cand++
			uf := ki.Fx*pk.X/pk.Z + ki.Cx
			vf := ki.Fy*pk.Y/pk.Z + ki.Cy
			if !(uf >= 1 && vf >= 1) {
				continue
			}
			x0, y0 := int(uf), int(vf)
			if x0+2 >= kw || y0+2 >= kh {
				continue
			}
			j := y0*kw + x0
			if !(pix[j].depth > 0 && pix[j+1].depth > 0 && pix[j+kw].depth > 0 && pix[j+kw+1].depth > 0) {
				continue
			}
			hits[n] = colourHit{si: int32(si), j: int32(j), uf: uf, vf: vf, pk: pk}
			n++
		}
		for h := range hits[:n] {
			hit := &hits[h]
			s := &samples[hit.si]
			c.add(pt, s, cw.apply(s.v), hit)
		}
	}
}

// add adds sample s, at p in the world, to pt, for its hit.
func (c *colourTerm) add(pt *photoPart, s *trackSample, p r3.Vec, hit *colourHit) {
	ki := &c.kl.intr
	kw := ki.Width
	pk, uf, vf := hit.pk, hit.uf, hit.vf
	x0, y0 := int(uf), int(vf)
	j := int(hit.j)
	pix := c.kl.pix
	p00, p01, p10, p11 := &pix[j], &pix[j+1], &pix[j+kw], &pix[j+kw+1]
	// Occlusion: the keyframe saw something else, nearer.
	if math.Abs(float64(p00.depth)-pk.Z) > max(0.01, 4*axialSigma(pk.Z, 0)) {
		return
	}
	tx, ty := float32(uf-float64(x0)), float32(vf-float64(y0))
	ik := float64((p00.lum*(1-tx)+p01.lum*tx)*(1-ty) + (p10.lum*(1-tx)+p11.lum*tx)*ty)
	gx := float64((p00.gx*(1-tx)+p01.gx*tx)*(1-ty) + (p10.gx*(1-tx)+p11.gx*tx)*ty)
	gy := float64((p00.gy*(1-tx)+p01.gy*tx)*(1-ty) + (p10.gy*(1-tx)+p11.gy*tx)*ty)
	in := float64(s.lum)
	a := c.a
	res := a*ik + c.b - in
	pt.sums[0] += ik
	pt.sums[1] += in
	pt.sums[2] += ik * ik
	pt.sums[3] += ik * in
	pt.sums[4]++
	pt.pair++
	// ∂r/∂p in the keyframe's camera, then in the world.
	iz := 1 / pk.Z
	gk := r3.Vec{
		X: a * gx * ki.Fx * iz,
		Y: a * gy * ki.Fy * iz,
		Z: -a * (gx*ki.Fx*pk.X + gy*ki.Fy*pk.Y) * iz * iz,
	}
	w := c.w0
	if ar := math.Abs(res); ar > c.huber {
		w *= c.huber / ar
	}
	pt.sys.AddGradient(p, c.keyR.rotate(gk), res, w)
}

// photoPart is one row band's share of the colour term.
type photoPart struct {
	sys        mesh.PlaneSystem
	sums       [5]float64
	cand, pair int
}

// fitGain fits I_new ≈ a·I_key + b to the sums photometric returns,
// keeping a within 0.5–2 (a wild fit on a few pairs is ignored).
func fitGain(s [5]float64) [2]float64 {
	n := s[4]
	if n < 100 {
		return [2]float64{1, 0}
	}
	vx := s[2] - s[0]*s[0]/n
	if !(vx > 0) {
		return [2]float64{1, 0}
	}
	a := (s[3] - s[0]*s[1]/n) / vx
	if !(a >= 0.5 && a <= 2) {
		return [2]float64{1, 0}
	}
	return [2]float64{a, (s[1] - a*s[0]) / n}
}
