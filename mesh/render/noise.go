package render

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// AxialSigma is the standard deviation in metres of a structured-light
// depth measurement along the optical axis at depth z (metres) on a
// surface whose normal makes angle theta (radians) with the viewing ray:
//
//	σ_z(z, θ) = 0.0012 + 0.0019·(z − 0.4)² + (0.0001/√z)·θ²/(π/2 − θ)²
//
// (Nguyen, Izadi & Lovell 2012, "Modeling Kinect sensor noise for
// improved 3D reconstruction and tracking", 3DIMPVT, DOI
// 10.1109/3DIMPVT.2012.84). It is about 1.2 mm at 0.5 m and 1.9 mm at
// 1 m face-on. It returns +Inf for θ ≥ π/2 and NaN for z ≤ 0.
func AxialSigma(z, theta float64) float64 {
	if !(z > 0) {
		return math.NaN()
	}
	theta = math.Abs(theta)
	if theta >= math.Pi/2 {
		return math.Inf(1)
	}
	g := theta / (math.Pi/2 - theta)
	return 0.0012 + 0.0019*(z-0.4)*(z-0.4) + 0.0001/math.Sqrt(z)*g*g
}

// LateralSigmaPixels is the standard deviation, in pixels, of where a
// structured-light depth sample lands across the image, for a surface
// whose normal makes angle theta with the viewing ray:
//
//	σ_L(θ) = 0.8 + 0.035·θ/(π/2 − θ)
//
// (Nguyen, Izadi & Lovell 2012, as AxialSigma); multiply by z/fx for
// metres. It returns +Inf for θ ≥ π/2.
func LateralSigmaPixels(theta float64) float64 {
	theta = math.Abs(theta)
	if theta >= math.Pi/2 {
		return math.Inf(1)
	}
	return 0.8 + 0.035*theta/(math.Pi/2-theta)
}

// NoiseOptions sets the sensor model. The zero value adds no noise at all
// (see NoNoise); DefaultNoiseOptions models a 640×480 structured-light
// sensor. Probabilities are per pixel and per frame.
type NoiseOptions struct {
	// AxialScale multiplies AxialSigma; 0 turns axial noise off.
	// DEFAULT: 1
	AxialScale float64
	// LateralScale multiplies LateralSigmaPixels; 0 turns the lateral
	// resampling off. Each pixel takes the depth of the pixel displaced
	// by a Gaussian offset of that standard deviation in u and v
	// (rounded to the nearest pixel), which blurs depth edges.
	// DEFAULT: 1
	LateralScale float64
	// GrazingStart and GrazingMax (radians) bound the dropout ramp at
	// grazing angles: a surface seen at θ ≤ GrazingStart is kept, at
	// θ ≥ GrazingMax it is lost, and in between it is lost with
	// probability rising linearly. GrazingMax = 0 turns this off.
	// DEFAULT: 70° and 80° (from memory: structured-light sensors lose
	// most returns beyond about 70–80°)
	GrazingStart, GrazingMax float64
	// EdgeJump is the depth step in metres between 4-neighbours (or a
	// step from surface to no surface) that marks a depth discontinuity.
	// Pixels within EdgeBand pixels of one lose their depth with
	// probability EdgeDropout (structured light misses along object
	// edges, where the projector's pattern is shadowed or broken up).
	// EdgeJump = 0 or EdgeDropout = 0 turns this off.
	// DEFAULT: EdgeJump 0.02 m, EdgeBand 1 (a band two pixels wide
	// straddling the step), EdgeDropout 0.6 (common practice, from
	// memory)
	EdgeJump    float64
	EdgeBand    int
	EdgeDropout float64
	// RandomDropout is the probability that any pixel loses its depth.
	// DEFAULT: 0.002
	RandomDropout float64
	// MinRange and MaxRange (metres) bound the measured depth; outside
	// them a pixel has no depth. 0 means no bound.
	// DEFAULT: 0.4 and 4.0 (from memory: structured-light sensors of this
	// class measure from about 0.4 m to about 4 m)
	MinRange, MaxRange float64
	// DisparityStep, when > 0, quantises depth as the sensor does: the
	// disparity d = BaselineFocal/z (pixels) is rounded to a multiple of
	// DisparityStep and converted back. 0 turns this off.
	// DEFAULT: 0 (off); a Kinect-class sensor uses 1/8 pixel with
	// BaselineFocal ≈ 0.075 m × 580 px = 43.5 m·px (from memory)
	DisparityStep float64
	// BaselineFocal is the projector–camera baseline times the focal
	// length, in metres·pixels, used by DisparityStep.
	// DEFAULT: 43.5 (from memory, see DisparityStep)
	BaselineFocal float64
	// ColorSigma is the standard deviation of per-pixel Gaussian noise
	// added to each 8-bit colour channel.
	// DEFAULT: 2
	ColorSigma float64
	// GainSigma, WhiteBalanceSigma and LightJitter drive PerturbLighting:
	// per-frame log-normal changes of gain and of each channel's white
	// balance (standard deviations of the natural logarithm), and a
	// random turn of the light direction (radians, standard deviation of
	// the turn angle about a random axis).
	// DEFAULT: 0.05, 0.02, 0.1
	GainSigma, WhiteBalanceSigma, LightJitter float64
}

// DefaultNoiseOptions returns the documented defaults of NoiseOptions.
func DefaultNoiseOptions() NoiseOptions {
	return NoiseOptions{
		AxialScale:        1,
		LateralScale:      1,
		GrazingStart:      70 * math.Pi / 180,
		GrazingMax:        80 * math.Pi / 180,
		EdgeJump:          0.02,
		EdgeBand:          1,
		EdgeDropout:       0.6,
		RandomDropout:     0.002,
		MinRange:          0.4,
		MaxRange:          4,
		BaselineFocal:     43.5,
		ColorSigma:        2,
		GainSigma:         0.05,
		WhiteBalanceSigma: 0.02,
		LightJitter:       0.1,
	}
}

// NoNoise returns options that change nothing: Sensor.Apply then copies
// the frame exactly and PerturbLighting returns its input. It is the zero
// value, spelt out for tests.
func NoNoise() NoiseOptions { return NoiseOptions{} }

// maxEdgeBand bounds EdgeBand; wider bands are not a sensor effect.
const maxEdgeBand = 16

// Validate reports options out of range.
func (o NoiseOptions) Validate() error {
	for _, f := range []struct {
		name string
		v    float64
		max  float64
	}{
		{"AxialScale", o.AxialScale, math.Inf(1)},
		{"LateralScale", o.LateralScale, math.Inf(1)},
		{"GrazingStart", o.GrazingStart, math.Pi / 2},
		{"GrazingMax", o.GrazingMax, math.Pi / 2},
		{"EdgeJump", o.EdgeJump, math.Inf(1)},
		{"EdgeDropout", o.EdgeDropout, 1},
		{"RandomDropout", o.RandomDropout, 1},
		{"MinRange", o.MinRange, math.Inf(1)},
		{"MaxRange", o.MaxRange, math.Inf(1)},
		{"DisparityStep", o.DisparityStep, math.Inf(1)},
		{"BaselineFocal", o.BaselineFocal, math.Inf(1)},
		{"ColorSigma", o.ColorSigma, math.Inf(1)},
		{"GainSigma", o.GainSigma, math.Inf(1)},
		{"WhiteBalanceSigma", o.WhiteBalanceSigma, math.Inf(1)},
		{"LightJitter", o.LightJitter, math.Inf(1)},
	} {
		if !(f.v >= 0 && f.v <= f.max) || math.IsInf(f.v, 0) {
			return fmt.Errorf("render: noise option %s = %v, want a finite value in [0, %v]", f.name, f.v, f.max)
		}
	}
	if o.GrazingMax > 0 && o.GrazingStart > o.GrazingMax {
		return fmt.Errorf("render: noise option GrazingStart = %v exceeds GrazingMax = %v", o.GrazingStart, o.GrazingMax)
	}
	if o.EdgeBand < 0 || o.EdgeBand > maxEdgeBand {
		return fmt.Errorf("render: noise option EdgeBand = %d, want 0..%d", o.EdgeBand, maxEdgeBand)
	}
	if o.MaxRange > 0 && o.MinRange >= o.MaxRange {
		return fmt.Errorf("render: noise options MinRange = %v, MaxRange = %v, want MinRange < MaxRange", o.MinRange, o.MaxRange)
	}
	if o.DisparityStep > 0 && !(o.BaselineFocal > 0) {
		return errors.New("render: noise option DisparityStep needs BaselineFocal > 0")
	}
	return nil
}

// PerturbLighting returns opt with this frame's random changes of gain,
// white balance and light direction drawn from rng (see NoiseOptions),
// to model light changes between the frames of a sweep. Call it before
// rendering each frame.
func PerturbLighting(opt Options, n NoiseOptions, rng *rand.Rand) Options {
	if n.GainSigma > 0 {
		opt.Gain *= math.Exp(n.GainSigma * rng.NormFloat64())
	}
	if n.WhiteBalanceSigma > 0 {
		for c := range opt.WhiteBalance {
			opt.WhiteBalance[c] *= math.Exp(n.WhiteBalanceSigma * rng.NormFloat64())
		}
	}
	if n.LightJitter > 0 && opt.LightDir != (r3.Vec{}) {
		axis := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		opt.LightDir = mesh.RotationFromAxisAngle(axis, n.LightJitter*rng.NormFloat64()).MulVec(opt.LightDir)
	}
	return opt
}

// Sensor applies the noise model to clean frames. It keeps scratch
// buffers, so reuse one per goroutine; it is not safe for concurrent use.
type Sensor struct {
	opt   NoiseOptions
	theta []float32 // viewing angle per pixel of the clean frame
	edge  []bool    // discontinuity band
	tmp   []bool
}

// NewSensor returns a Sensor with opt.
func NewSensor(opt NoiseOptions) (*Sensor, error) {
	if err := opt.Validate(); err != nil {
		return nil, err
	}
	return &Sensor{opt: opt}, nil
}

// Options returns the sensor's noise options.
func (s *Sensor) Options() NoiseOptions { return s.opt }

// AddNoise returns a noisy copy of clean, drawing from rng.
func AddNoise(clean *Frame, opt NoiseOptions, rng *rand.Rand) (*Frame, error) {
	s, err := NewSensor(opt)
	if err != nil {
		return nil, err
	}
	dst := &Frame{}
	if err := s.Apply(dst, clean, rng); err != nil {
		return nil, err
	}
	return dst, nil
}

// Apply writes into dst a noisy version of the clean frame src, drawing
// from rng; dst's buffers are reused when they fit, and dst must not be
// src. Depth and Color carry the noise; Normal, Object and Triangle are
// copied from src unchanged, as ground truth of the clean render. The
// viewing angle θ comes from src.Normal; a pixel with depth but a zero
// normal (a frame built from a depth image alone) is taken as face-on.
//
// For every pixel p, in order: the lateral offset picks the source pixel
// q (σ_L from the viewing angle at p, or at θ = 0 where p sees nothing);
// q's clean depth z and angle θ are kept unless a dropout applies
// (grazing angle at q, p in a discontinuity band, random); axial noise
// N(0, AxialSigma(z, θ)) is added; the disparity is quantised; depths
// outside [MinRange, MaxRange] are removed. The same src, options and
// rng state give the same result.
func (s *Sensor) Apply(dst, src *Frame, rng *rand.Rand) error {
	if err := src.check(); err != nil {
		return err
	}
	if dst == nil || dst == src {
		return errors.New("render: noise destination must be a frame other than the source")
	}
	if rng == nil {
		return errors.New("render: noise needs a random source")
	}
	k := src.Intr
	w, h := k.Width, k.Height
	n := w * h
	dst.resize(k)
	copy(dst.Normal, src.Normal)
	copy(dst.Object, src.Object)
	copy(dst.Triangle, src.Triangle)
	o := &s.opt

	s.theta = resizeSlice(s.theta, n)
	for j := 0; j < h; j++ {
		for i := 0; i < w; i++ {
			p := j*w + i
			nx, ny, nz := float64(src.Normal[3*p]), float64(src.Normal[3*p+1]), float64(src.Normal[3*p+2])
			nn := math.Sqrt(nx*nx + ny*ny + nz*nz)
			if nn == 0 { // no normal known: take the surface as face-on
				s.theta[p] = 0
				continue
			}
			d := k.Ray(float64(i), float64(j))
			c := math.Abs(nx*d.X+ny*d.Y+nz*d.Z) / (nn * math.Sqrt(d.X*d.X+d.Y*d.Y+1))
			s.theta[p] = float32(math.Acos(math.Min(c, 1)))
		}
	}
	edges := o.EdgeJump > 0 && o.EdgeDropout > 0
	if edges {
		s.markEdges(src.Depth, w, h)
	}

	for j := 0; j < h; j++ {
		for i := 0; i < w; i++ {
			p := j*w + i
			q := p
			if o.LateralScale > 0 {
				th := 0.0
				if src.Depth[p] > 0 {
					th = float64(s.theta[p])
				}
				sl := o.LateralScale * LateralSigmaPixels(th)
				qi := math.Round(float64(i) + sl*rng.NormFloat64())
				qj := math.Round(float64(j) + sl*rng.NormFloat64())
				if !(qi >= 0 && qi < float64(w) && qj >= 0 && qj < float64(h)) { // also catches NaN
					dst.Depth[p] = 0
					continue
				}
				q = int(qj)*w + int(qi)
			}
			z := float64(src.Depth[q])
			if z <= 0 {
				dst.Depth[p] = 0
				continue
			}
			th := float64(s.theta[q])
			drop := false
			if o.GrazingMax > 0 && th > o.GrazingStart {
				drop = th >= o.GrazingMax || rng.Float64() < (th-o.GrazingStart)/(o.GrazingMax-o.GrazingStart)
			}
			if !drop && edges && s.edge[p] {
				drop = rng.Float64() < o.EdgeDropout
			}
			if !drop && o.RandomDropout > 0 {
				drop = rng.Float64() < o.RandomDropout
			}
			if drop {
				dst.Depth[p] = 0
				continue
			}
			if o.AxialScale > 0 {
				z += o.AxialScale * AxialSigma(z, th) * rng.NormFloat64()
			}
			if o.DisparityStep > 0 && z > 0 {
				d := math.Round(o.BaselineFocal/z/o.DisparityStep) * o.DisparityStep
				z = o.BaselineFocal / d // d = 0 gives +Inf, removed below
			}
			if !(z > 0) || math.IsInf(z, 0) || (o.MinRange > 0 && z < o.MinRange) || (o.MaxRange > 0 && z > o.MaxRange) {
				z = 0
			}
			dst.Depth[p] = float32(z)
		}
	}

	sp, dp := src.Color.Pix, dst.Color.Pix
	if o.ColorSigma > 0 {
		for i := 0; i+3 < len(sp); i += 4 {
			for c := 0; c < 3; c++ {
				dp[i+c] = to8(float64(sp[i+c]) + o.ColorSigma*rng.NormFloat64())
			}
			dp[i+3] = sp[i+3]
		}
	} else {
		copy(dp, sp)
	}
	return nil
}

// markEdges sets s.edge for pixels within EdgeBand of a depth
// discontinuity of the clean depth: a 4-neighbour pair whose depths
// differ by more than EdgeJump, or where one sees a surface and the
// other does not, marks both pixels; the marks are then dilated by
// EdgeBand − 1 pixels (Chebyshev distance). The image border is not an
// edge.
func (s *Sensor) markEdges(depth []float32, w, h int) {
	n := w * h
	s.edge = resizeSlice(s.edge, n)
	clear(s.edge)
	jump := float32(s.opt.EdgeJump)
	step := func(a, b float32) bool {
		if (a > 0) != (b > 0) {
			return true
		}
		return a > 0 && (a-b > jump || b-a > jump)
	}
	for j := 0; j < h; j++ {
		for i := 0; i < w; i++ {
			p := j*w + i
			if i+1 < w && step(depth[p], depth[p+1]) {
				s.edge[p], s.edge[p+1] = true, true
			}
			if j+1 < h && step(depth[p], depth[p+w]) {
				s.edge[p], s.edge[p+w] = true, true
			}
		}
	}
	r := s.opt.EdgeBand - 1
	if r <= 0 {
		return
	}
	// Separable dilation: rows into tmp, then columns back into edge.
	s.tmp = resizeSlice(s.tmp, n)
	for j := 0; j < h; j++ {
		row := j * w
		for i := 0; i < w; i++ {
			v := false
			for x := max(0, i-r); x <= min(w-1, i+r) && !v; x++ {
				v = s.edge[row+x]
			}
			s.tmp[row+i] = v
		}
	}
	for j := 0; j < h; j++ {
		for i := 0; i < w; i++ {
			v := false
			for y := max(0, j-r); y <= min(h-1, j+r) && !v; y++ {
				v = s.tmp[y*w+i]
			}
			s.edge[j*w+i] = v
		}
	}
}
