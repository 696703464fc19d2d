package reconstruct

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"io/fs"
	"os"
	"strings"

	"github.com/scanfold/scanfold/mesh"
)

// LoadOptions controls LoadSweepWith.
type LoadOptions struct {
	// Strict makes any per-frame problem fatal. DEFAULT: false (frames
	// with problems are skipped and listed in Sweep.Skipped).
	Strict bool
	// CheckPixels decodes every frame's images while loading, one frame
	// at a time, so that truncated or corrupt image data is found up
	// front rather than when Sweep.Frame reads the frame. DEFAULT: false
	// (only the PNG headers are read: signature, size, bit depth and
	// colour type).
	CheckPixels bool
	// Progress, when not nil, is called after each frame is checked.
	// DEFAULT: nil.
	Progress func(done, total int)
}

// DefaultLoadOptions returns the defaults documented on LoadOptions.
func DefaultLoadOptions() LoadOptions { return LoadOptions{} }

// Sweep is a loaded, checked sweep folder. Frames are read on demand by
// Frame, so a sweep of any length takes the memory of its manifest plus
// the frames the caller holds. A Sweep is safe for concurrent use.
type Sweep struct {
	// Dir is the sweep folder.
	Dir string
	// Manifest is the parsed sweep.json.
	Manifest *Manifest
	// Skipped lists the frames left out, in frame order, each with the
	// reason. Always empty after a strict load.
	Skipped []*FrameError

	skipped map[int]*FrameError
	usable  []int
}

// Frame is one decoded frame of a sweep.
type Frame struct {
	// Index is the frame's position in the manifest.
	Index int
	// Intr are the sweep's intrinsics; Depth and Color have its size.
	Intr mesh.Intrinsics
	// Depth holds Intr.Width·Intr.Height depths in metres along the
	// optical axis, row-major; 0 means no measurement.
	Depth []float32
	// Color is the registered colour image.
	Color *image.NRGBA
	// Time is the capture time in seconds when HasTime.
	Time    float64
	HasTime bool
	// Angle is the turntable angle in radians, as recorded, when
	// HasAngle.
	Angle    float64
	HasAngle bool
	// CamToWorld is the camera pose in the sweep's world frame when
	// HasPose: from the manifest for a handheld sweep, or from the
	// turntable angle and the calibrated axis (TurntablePose) when
	// both are known.
	CamToWorld mesh.Pose
	HasPose    bool
}

// LoadSweep loads and checks the sweep folder dir with the default
// options: frames with problems are skipped and recorded.
func LoadSweep(dir string) (*Sweep, error) {
	return LoadSweepWith(context.Background(), dir, DefaultLoadOptions())
}

// LoadSweepWith loads and checks the sweep folder dir. Sweep-level
// problems (an unreadable or invalid manifest, invalid intrinsics, no
// usable frame) return an error; per-frame problems (a missing or
// corrupt image, an 8-bit depth image, images of the wrong size, a
// non-rigid pose, a missing turntable angle) skip the frame unless
// opt.Strict. Every error names the file, the frame and the field.
func LoadSweepWith(ctx context.Context, dir string, opt LoadOptions) (*Sweep, error) {
	root, err := os.OpenRoot(dir)
	if err != nil {
		return nil, &SweepError{File: dir, Msg: fmt.Sprintf("cannot open the sweep folder: %v", unwrapPath(err)), Kind: ErrInvalid}
	}
	defer root.Close()
	data, err := readBounded(root, ManifestName, MaxManifestBytes)
	if err != nil {
		return nil, &SweepError{File: ManifestName, Msg: fmt.Sprintf("%v (in %s)", err, dir), Kind: ErrInvalid}
	}
	m, err := ParseManifest(data)
	if err != nil {
		return nil, err
	}
	s := &Sweep{Dir: dir, Manifest: m, skipped: map[int]*FrameError{}}
	probs := m.FrameProblems()
	var buf []byte
	for i := range m.Frames {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("reconstruct: loading %s: %w", dir, err)
		}
		fe := probs[i]
		if fe == nil {
			fe = s.checkFiles(root, i)
		}
		if fe == nil && opt.CheckPixels {
			_, fe, buf = s.readFrame(root, i, buf)
		}
		if fe != nil {
			s.Skipped = append(s.Skipped, fe)
			s.skipped[i] = fe
		} else {
			s.usable = append(s.usable, i)
		}
		if opt.Progress != nil {
			opt.Progress(i+1, len(m.Frames))
		}
	}
	if opt.Strict && len(s.Skipped) > 0 {
		p := &problems{file: ManifestName}
		for _, fe := range s.Skipped {
			p.addErr(fe)
		}
		return nil, p.err()
	}
	if len(s.usable) == 0 {
		return nil, fmt.Errorf("%w in %s: all %d frames have problems, the first: %v", ErrNoFrames, dir, len(m.Frames), s.Skipped[0])
	}
	return s, nil
}

// NumFrames returns the number of frames in the manifest, usable or
// not.
func (s *Sweep) NumFrames() int { return len(s.Manifest.Frames) }

// Usable returns the indices of the frames that passed the checks, in
// order. The slice is the Sweep's own; do not modify it.
func (s *Sweep) Usable() []int { return s.usable }

// Frame reads frame i. It returns the recorded FrameError for a skipped
// frame, and a new FrameError when the images turn out to be corrupt
// only now (LoadOptions.CheckPixels finds those at load time).
func (s *Sweep) Frame(i int) (*Frame, error) {
	if i < 0 || i >= len(s.Manifest.Frames) {
		return nil, fmt.Errorf("reconstruct: frame %d out of range [0, %d)", i, len(s.Manifest.Frames))
	}
	if fe := s.skipped[i]; fe != nil {
		return nil, fe
	}
	root, err := os.OpenRoot(s.Dir)
	if err != nil {
		return nil, &SweepError{File: s.Dir, Msg: fmt.Sprintf("cannot open the sweep folder: %v", unwrapPath(err)), Kind: ErrInvalid}
	}
	defer root.Close()
	f, fe, _ := s.readFrame(root, i, nil)
	if fe != nil {
		return nil, fe
	}
	return f, nil
}

// framePose works out what the manifest says about frame i's pose.
func (s *Sweep) framePose(i int, f *Frame) error {
	m := s.Manifest
	e := &m.Frames[i]
	if e.Time != nil {
		f.Time, f.HasTime = *e.Time, true
	}
	if e.Angle != nil {
		f.Angle, f.HasAngle = *e.Angle, true
		ref := m.Frames[0].Angle
		if t := m.Turntable; t != nil && t.Axis != nil && ref != nil && finite(*ref) {
			f.CamToWorld = TurntablePose(t.Axis.Point, t.Axis.Direction, float64(t.AngleSign)*(*e.Angle-*ref))
			f.HasPose = true
		}
	}
	if e.CamToWorld != nil {
		var a [16]float64
		copy(a[:], e.CamToWorld)
		p, err := mesh.PoseFromMat4(a, PoseTolerance)
		if err != nil {
			return err // FrameProblems has already refused it
		}
		f.CamToWorld, f.HasPose = p.Orthonormalize(), true
	}
	return nil
}

// checkFiles checks that frame i's images exist, are PNGs of the right
// kind and size, reading only their headers.
func (s *Sweep) checkFiles(root *os.Root, i int) *FrameError {
	e := &s.Manifest.Frames[i]
	for _, img := range []struct {
		field, name string
		depth       bool
	}{{"color", e.Color, false}, {"depth", e.Depth, true}} {
		fe := func(msg string, err error) *FrameError {
			return &FrameError{Frame: i, File: img.name, Field: img.field, Msg: msg, Err: err}
		}
		st, err := root.Stat(img.name)
		switch {
		case errors.Is(err, fs.ErrNotExist):
			return fe("file not found; check the path in "+ManifestName, nil)
		case err != nil:
			return fe("cannot be read inside the sweep folder", unwrapPath(err))
		case !st.Mode().IsRegular():
			return fe("not a regular file", nil)
		case st.Size() > MaxImageBytes:
			return fe(fmt.Sprintf("%d bytes, more than the %d an image may have", st.Size(), MaxImageBytes), nil)
		}
		f, err := root.Open(img.name)
		if err != nil {
			return fe("cannot be opened", unwrapPath(err))
		}
		cfg, err := png.DecodeConfig(bufio.NewReader(f))
		f.Close()
		if msg := s.checkConfig(cfg, err, img.depth); msg != "" {
			return fe(msg, err)
		}
	}
	return nil
}

// checkConfig returns what is wrong with a PNG header, "" when fine.
func (s *Sweep) checkConfig(cfg image.Config, err error, depth bool) string {
	if err != nil {
		if errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) {
			return "truncated PNG"
		}
		return "not a readable PNG"
	}
	k := s.Manifest.Intrinsics
	if depth {
		switch cfg.ColorModel {
		case color.Gray16Model:
		case color.GrayModel:
			return "8-bit depth image; depth must be a 16-bit grayscale PNG in counts of depth_unit_m"
		default:
			return fmt.Sprintf("%s PNG; depth must be 16-bit grayscale", modelName(cfg.ColorModel))
		}
	} else {
		switch cfg.ColorModel {
		case color.RGBAModel, color.NRGBAModel, color.GrayModel:
		case color.RGBA64Model, color.NRGBA64Model, color.Gray16Model:
			return fmt.Sprintf("%s PNG; colour must have 8 bits per channel", modelName(cfg.ColorModel))
		default:
			if _, ok := cfg.ColorModel.(color.Palette); !ok {
				return fmt.Sprintf("%s PNG; colour must be 8-bit RGB, RGBA, grey or paletted", modelName(cfg.ColorModel))
			}
		}
	}
	if cfg.Width != k.Width || cfg.Height != k.Height {
		return fmt.Sprintf("%d×%d pixels, but the intrinsics say %d×%d", cfg.Width, cfg.Height, k.Width, k.Height)
	}
	return ""
}

func modelName(m color.Model) string {
	switch m {
	case color.GrayModel:
		return "8-bit grayscale"
	case color.Gray16Model:
		return "16-bit grayscale"
	case color.RGBAModel:
		return "8-bit RGB"
	case color.NRGBAModel:
		return "8-bit RGBA"
	case color.RGBA64Model:
		return "16-bit RGB"
	case color.NRGBA64Model:
		return "16-bit RGBA"
	}
	if _, ok := m.(color.Palette); ok {
		return "paletted"
	}
	return "unknown colour type"
}

// readFrame decodes frame i. buf is a scratch buffer for file bytes,
// returned for reuse.
func (s *Sweep) readFrame(root *os.Root, i int, buf []byte) (*Frame, *FrameError, []byte) {
	m := s.Manifest
	e := &m.Frames[i]
	k := m.Intrinsics
	f := &Frame{Index: i, Intr: k}
	if err := s.framePose(i, f); err != nil {
		return nil, &FrameError{Frame: i, File: ManifestName, Field: "cam_to_world", Msg: "not a rigid transform", Err: err}, buf
	}
	for _, img := range []struct {
		field, name string
		depth       bool
	}{{"depth", e.Depth, true}, {"color", e.Color, false}} {
		fe := func(msg string, err error) *FrameError {
			return &FrameError{Frame: i, File: img.name, Field: img.field, Msg: msg, Err: err}
		}
		var err error
		buf, err = readInto(root, img.name, MaxImageBytes, buf[:0])
		if err != nil {
			return nil, fe("cannot be read", err), buf
		}
		cfg, err := png.DecodeConfig(bytes.NewReader(buf))
		if msg := s.checkConfig(cfg, err, img.depth); msg != "" {
			return nil, fe(msg, err), buf
		}
		// The header matches the intrinsics, which are bounded by
		// MaxPixels, so the decoder's allocation is bounded too.
		if d, c, ok := decodeSweepPNG(buf, img.depth, m.DepthUnit, k.Width, k.Height); ok {
			if img.depth {
				f.Depth = d
			} else {
				f.Color = c
			}
			continue
		}
		im, err := png.Decode(bytes.NewReader(buf))
		if err != nil {
			msg := "corrupt PNG data"
			if errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) || strings.Contains(err.Error(), "not enough pixel data") {
				msg = "truncated PNG"
			}
			return nil, fe(msg, err), buf
		}
		if img.depth {
			g, ok := im.(*image.Gray16)
			if !ok {
				return nil, fe("depth did not decode as 16-bit grayscale", nil), buf
			}
			f.Depth = depthFromGray16(g, m.DepthUnit)
		} else {
			f.Color = toNRGBA(im)
		}
	}
	return f, nil, buf
}

// depthFromGray16 converts counts to metres; 0 stays 0 (no
// measurement).
func depthFromGray16(g *image.Gray16, unit float64) []float32 {
	b := g.Bounds()
	w, h := b.Dx(), b.Dy()
	out := make([]float32, w*h)
	for y := 0; y < h; y++ {
		row := g.Pix[y*g.Stride : y*g.Stride+2*w]
		for x := 0; x < w; x++ {
			v := uint16(row[2*x])<<8 | uint16(row[2*x+1])
			out[y*w+x] = float32(float64(v) * unit)
		}
	}
	return out
}

// toNRGBA converts a decoded 8-bit PNG to non-premultiplied RGBA with
// its origin at (0, 0).
func toNRGBA(im image.Image) *image.NRGBA {
	b := im.Bounds()
	out := image.NewNRGBA(image.Rect(0, 0, b.Dx(), b.Dy()))
	switch src := im.(type) {
	case *image.NRGBA:
		for y := 0; y < b.Dy(); y++ {
			copy(out.Pix[y*out.Stride:y*out.Stride+4*b.Dx()], src.Pix[y*src.Stride:])
		}
	case *image.RGBA:
		// The PNG decoder returns *image.RGBA only for opaque RGB, where
		// premultiplied and straight alpha agree.
		for y := 0; y < b.Dy(); y++ {
			copy(out.Pix[y*out.Stride:y*out.Stride+4*b.Dx()], src.Pix[y*src.Stride:])
		}
	default:
		for y := 0; y < b.Dy(); y++ {
			for x := 0; x < b.Dx(); x++ {
				c := color.NRGBAModel.Convert(im.At(b.Min.X+x, b.Min.Y+y)).(color.NRGBA)
				i := y*out.Stride + 4*x
				out.Pix[i], out.Pix[i+1], out.Pix[i+2], out.Pix[i+3] = c.R, c.G, c.B, c.A
			}
		}
	}
	return out
}

// readBounded reads a whole file inside root, refusing files larger
// than limit.
func readBounded(root *os.Root, name string, limit int64) ([]byte, error) {
	return readInto(root, name, limit, nil)
}

func readInto(root *os.Root, name string, limit int64, buf []byte) ([]byte, error) {
	f, err := root.Open(name)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return buf, errors.New("file not found")
		}
		return buf, unwrapPath(err)
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return buf, err
	}
	if st.Size() > limit {
		return buf, fmt.Errorf("%d bytes, more than the %d allowed", st.Size(), limit)
	}
	if int64(cap(buf)) < st.Size()+1 {
		buf = make([]byte, 0, st.Size()+512)
	}
	buf = buf[:0]
	for {
		if len(buf) == cap(buf) {
			if int64(len(buf)) > limit {
				return buf, fmt.Errorf("more than the %d bytes allowed", limit)
			}
			buf = append(buf, 0)[:len(buf)]
		}
		n, err := f.Read(buf[len(buf):cap(buf)])
		buf = buf[:len(buf)+n]
		if err == io.EOF {
			return buf, nil
		}
		if err != nil {
			return buf, err
		}
	}
}

// unwrapPath drops the *fs.PathError wrapper, whose path is already
// named by the caller.
func unwrapPath(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

// DepthImage returns the frame as TSDF integration takes it: the same
// depth slice and the colour as packed RGB (alpha dropped).
func (f *Frame) DepthImage() *DepthImage {
	n := f.Intr.Width * f.Intr.Height
	im := &DepthImage{Intr: f.Intr, Depth: f.Depth}
	if f.Color != nil {
		im.Color = make([]uint8, 3*n)
		w := f.Intr.Width
		for y := 0; y < f.Intr.Height; y++ {
			row := f.Color.Pix[y*f.Color.Stride:]
			for x := 0; x < w; x++ {
				copy(im.Color[3*(y*w+x):3*(y*w+x)+3], row[4*x:4*x+3])
			}
		}
	}
	return im
}
