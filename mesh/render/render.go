package render

import (
	"errors"
	"fmt"
	"image"
	"math"

	"github.com/fogleman/fauxgl"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Object is one mesh placed in front of the camera.
type Object struct {
	Mesh       *mesh.Mesh
	ModelToCam mesh.Pose
	Color      mesh.RGB // albedo used when Mesh.Colors is nil
}

// Options controls the drawing of a frame. The zero value is not useful;
// start from DefaultOptions.
type Options struct {
	// LightDir is the direction from the surface towards a distant light,
	// in the camera frame; it need not be unit length. The zero vector
	// leaves only the ambient term.
	// DEFAULT: (−0.3, −0.5, −1), above and left of the camera, shining
	// forward.
	LightDir r3.Vec
	// Ambient is the share of the albedo seen regardless of the light.
	// DEFAULT: 0.3
	Ambient float64
	// Diffuse weighs the Lambertian term albedo·max(0, n·l).
	// DEFAULT: 0.7
	Diffuse float64
	// Specular weighs a white Blinn–Phong highlight max(0, n·h)^Shininess
	// (Blinn 1977, SIGGRAPH, DOI 10.1145/563858.563893).
	// DEFAULT: 0.1
	Specular float64
	// Shininess is the Blinn–Phong exponent.
	// DEFAULT: 32
	Shininess float64
	// Gain multiplies every colour channel after shading: exposure or a
	// change of light level between frames.
	// DEFAULT: 1
	Gain float64
	// WhiteBalance multiplies the R, G and B channels after Gain.
	// DEFAULT: {1, 1, 1}
	WhiteBalance [3]float64
	// Background is the colour of pixels that see no surface.
	// DEFAULT: {0, 0, 0}
	Background mesh.RGB
	// Near and Far bound the depth z of drawn surface points, in metres.
	// Surfaces nearer than Near are clipped away.
	// DEFAULT: Near 0.01, Far 100
	Near, Far float64
	// CullBackFaces skips faces whose outward normal (right-hand rule)
	// points away from the camera. Leave it off for open surfaces, whose
	// inside a real camera can see.
	// DEFAULT: false
	CullBackFaces bool
}

// DefaultOptions returns the documented defaults of Options.
func DefaultOptions() Options {
	return Options{
		LightDir:     r3.Vec{X: -0.3, Y: -0.5, Z: -1},
		Ambient:      0.3,
		Diffuse:      0.7,
		Specular:     0.1,
		Shininess:    32,
		Gain:         1,
		WhiteBalance: [3]float64{1, 1, 1},
		Near:         0.01,
		Far:          100,
	}
}

// Validate reports options that cannot be drawn with.
func (o Options) Validate() error {
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"Ambient", o.Ambient}, {"Diffuse", o.Diffuse}, {"Specular", o.Specular},
		{"Shininess", o.Shininess}, {"Gain", o.Gain},
		{"WhiteBalance[0]", o.WhiteBalance[0]}, {"WhiteBalance[1]", o.WhiteBalance[1]},
		{"WhiteBalance[2]", o.WhiteBalance[2]},
	} {
		if !(f.v >= 0) || math.IsInf(f.v, 0) {
			return fmt.Errorf("render: option %s = %v, want a finite value ≥ 0", f.name, f.v)
		}
	}
	if !finiteVec(o.LightDir) {
		return fmt.Errorf("render: option LightDir = %v is not finite", o.LightDir)
	}
	if !(o.Near > 0) || !(o.Far > o.Near) || math.IsInf(o.Far, 0) {
		return fmt.Errorf("render: options Near = %v, Far = %v, want 0 < Near < Far < ∞", o.Near, o.Far)
	}
	return nil
}

// Frame is one rendered RGB-D image with per-pixel ground truth. Every
// slice is row-major with Intr.Width·Intr.Height pixels (Normal has three
// values per pixel).
type Frame struct {
	Intr     mesh.Intrinsics
	Color    *image.NRGBA // 8-bit colour with simple lighting; Options.Background where nothing is seen
	Depth    []float32    // z in metres along the optical axis; 0 = no surface
	Normal   []float32    // unit normal (x, y, z) in the camera frame, facing the camera; 0 where nothing is seen
	Object   []int32      // index into the objects drawn, −1 = none
	Triangle []int32      // face index within that object's mesh, −1 = none
}

// NewFrame returns an empty frame (nothing seen, black) for intr.
func NewFrame(intr mesh.Intrinsics) (*Frame, error) {
	if err := intr.Validate(); err != nil {
		return nil, fmt.Errorf("render: %w", err)
	}
	f := &Frame{}
	f.resize(intr)
	f.clear(mesh.RGB{})
	return f, nil
}

// resize makes f's buffers fit intr, reusing them when they already do.
func (f *Frame) resize(intr mesh.Intrinsics) {
	n := intr.Width * intr.Height
	f.Intr = intr
	if f.Color == nil || f.Color.Rect.Dx() != intr.Width || f.Color.Rect.Dy() != intr.Height {
		f.Color = image.NewNRGBA(image.Rect(0, 0, intr.Width, intr.Height))
	}
	f.Depth = resizeSlice(f.Depth, n)
	f.Normal = resizeSlice(f.Normal, 3*n)
	f.Object = resizeSlice(f.Object, n)
	f.Triangle = resizeSlice(f.Triangle, n)
}

func resizeSlice[T any](s []T, n int) []T {
	if cap(s) >= n {
		return s[:n]
	}
	return make([]T, n)
}

func (f *Frame) clear(bg mesh.RGB) {
	for i := range f.Depth {
		f.Depth[i] = 0
		f.Object[i] = -1
		f.Triangle[i] = -1
	}
	clear(f.Normal)
	pix := f.Color.Pix
	for i := 0; i+3 < len(pix); i += 4 {
		pix[i], pix[i+1], pix[i+2], pix[i+3] = bg.R, bg.G, bg.B, 255
	}
}

// check reports a frame whose buffers do not match its intrinsics.
func (f *Frame) check() error {
	if f == nil {
		return errors.New("render: nil frame")
	}
	if err := f.Intr.Validate(); err != nil {
		return fmt.Errorf("render: frame %w", err)
	}
	n := f.Intr.Width * f.Intr.Height
	switch {
	case f.Color == nil || f.Color.Rect != image.Rect(0, 0, f.Intr.Width, f.Intr.Height):
		return fmt.Errorf("render: frame colour image does not match %d×%d intrinsics", f.Intr.Width, f.Intr.Height)
	case len(f.Depth) != n:
		return fmt.Errorf("render: frame has %d depth values for %d pixels", len(f.Depth), n)
	case len(f.Normal) != 3*n:
		return fmt.Errorf("render: frame has %d normal values for %d pixels (want 3 each)", len(f.Normal), n)
	case len(f.Object) != n:
		return fmt.Errorf("render: frame has %d object labels for %d pixels", len(f.Object), n)
	case len(f.Triangle) != n:
		return fmt.Errorf("render: frame has %d triangle labels for %d pixels", len(f.Triangle), n)
	}
	return nil
}

// Clone returns a deep copy of f.
func (f *Frame) Clone() *Frame {
	g := &Frame{Intr: f.Intr}
	if f.Color != nil {
		c := *f.Color
		c.Pix = append([]uint8(nil), f.Color.Pix...)
		g.Color = &c
	}
	g.Depth = append([]float32(nil), f.Depth...)
	g.Normal = append([]float32(nil), f.Normal...)
	g.Object = append([]int32(nil), f.Object...)
	g.Triangle = append([]int32(nil), f.Triangle...)
	return g
}

// NormalAt returns the normal at pixel (x, y), the zero vector where
// nothing is seen.
func (f *Frame) NormalAt(x, y int) r3.Vec {
	k := 3 * (y*f.Intr.Width + x)
	return r3.Vec{X: float64(f.Normal[k]), Y: float64(f.Normal[k+1]), Z: float64(f.Normal[k+2])}
}

// PointAt returns the camera-frame point seen at pixel (x, y) by
// back-projecting its depth, and false where the depth is 0.
func (f *Frame) PointAt(x, y int) (r3.Vec, bool) {
	z := f.Depth[y*f.Intr.Width+x]
	if z == 0 {
		return r3.Vec{}, false
	}
	return f.Intr.BackProject(float64(x), float64(y), float64(z)), true
}

// Renderer draws frames for one camera. It owns a fauxgl context and
// scratch buffers, so reuse it for many frames; it is not safe for
// concurrent use (use one Renderer per goroutine).
type Renderer struct {
	intr   mesh.Intrinsics
	ctx    *fauxgl.Context
	shader idShader
	tri    fauxgl.Triangle
	cam    [][]r3.Vec // camera-frame vertices, per object
	faces  [][]mesh.Face
	base   []uint32 // global id of each object's face 0, minus 1
}

// NewRenderer returns a renderer for images of intr.
func NewRenderer(intr mesh.Intrinsics) (*Renderer, error) {
	if err := intr.Validate(); err != nil {
		return nil, fmt.Errorf("render: %w", err)
	}
	ctx := fauxgl.NewContext(intr.Width, intr.Height)
	ctx.ClearColor = fauxgl.Transparent // id 0: nothing seen
	ctx.AlphaBlend = false
	ctx.ReadDepth = true
	ctx.WriteDepth = true
	ctx.WriteColor = true
	ctx.Wireframe = false
	ctx.Cull = fauxgl.CullBack // with FrontFace chosen per face; see drawObject
	r := &Renderer{intr: intr, ctx: ctx}
	ctx.Shader = &r.shader
	return r, nil
}

// Intrinsics returns the camera the renderer draws for.
func (r *Renderer) Intrinsics() mesh.Intrinsics { return r.intr }

// Render draws objs into a new Frame.
func (r *Renderer) Render(objs []Object, opt Options) (*Frame, error) {
	f := &Frame{}
	if err := r.RenderInto(f, objs, opt); err != nil {
		return nil, err
	}
	return f, nil
}

// Render draws objs with a one-off Renderer for intr.
func Render(intr mesh.Intrinsics, objs []Object, opt Options) (*Frame, error) {
	r, err := NewRenderer(intr)
	if err != nil {
		return nil, err
	}
	return r.Render(objs, opt)
}

// maxFaces bounds the total face count of one frame: face ids are packed
// into the 32 bits of a colour, with 0 meaning "nothing".
const maxFaces = math.MaxUint32 - 1

// RenderInto draws objs into dst, reusing dst's buffers when they fit the
// renderer's intrinsics (and replacing them when they do not). On error
// dst's contents are unspecified.
//
// Faces are rasterised one at a time in order (fauxgl's parallel
// DrawTriangles would race on the shader's face id and break ties at
// equal depth in a different order from run to run), then every pixel is
// resolved exactly; one frame uses one core. Render frames in parallel
// with one Renderer per goroutine.
func (r *Renderer) RenderInto(dst *Frame, objs []Object, opt Options) error {
	if dst == nil {
		return errors.New("render: nil destination frame")
	}
	if err := opt.Validate(); err != nil {
		return err
	}
	if err := r.prepare(objs); err != nil {
		return err
	}
	r.shader.m = projection(r.intr, opt.Near, opt.Far)
	r.ctx.ClearColorBuffer()
	r.ctx.ClearDepthBuffer()
	for o := range objs {
		r.drawObject(o, objs[o].Mesh, opt.CullBackFaces)
	}
	dst.resize(r.intr)
	r.resolve(dst, objs, opt)
	return nil
}

// prepare validates objs, transforms their vertices into the camera
// frame and assigns face ids.
func (r *Renderer) prepare(objs []Object) error {
	if cap(r.cam) < len(objs) {
		r.cam = append(r.cam[:cap(r.cam)], make([][]r3.Vec, len(objs)-cap(r.cam))...)
	}
	r.cam = r.cam[:len(objs)]
	r.base = r.base[:0]
	r.faces = r.faces[:0]
	var total uint64
	for o, obj := range objs {
		if obj.Mesh == nil {
			return fmt.Errorf("render: object %d has no mesh", o)
		}
		if err := obj.Mesh.Validate(); err != nil {
			return fmt.Errorf("render: object %d: %w", o, err)
		}
		if !finitePose(obj.ModelToCam) {
			return fmt.Errorf("render: object %d: ModelToCam pose is not finite", o)
		}
		r.base = append(r.base, uint32(total))
		r.faces = append(r.faces, obj.Mesh.Faces)
		total += uint64(len(obj.Mesh.Faces))
		if total > maxFaces {
			return fmt.Errorf("render: %d faces in one frame exceed the limit of %d", total, uint64(maxFaces))
		}
		cam := resizeSlice(r.cam[o], len(obj.Mesh.Vertices))
		for i, v := range obj.Mesh.Vertices {
			p := obj.ModelToCam.Apply(v)
			if !finiteVec(p) {
				return fmt.Errorf("render: object %d: vertex %d is not finite in the camera frame (%v)", o, i, p)
			}
			cam[i] = p
		}
		r.cam[o] = cam
	}
	return nil
}

// planeEps is the sine of the smallest angle between a face's plane and
// the line from the camera centre to the face below which the face is
// taken as seen edge-on and skipped: its projection has (relative) area
// below 1e−9 and covers no pixel centre except by rounding. Skipping it
// also keeps fauxgl from dividing by a zero screen-space area.
const planeEps = 1e-9

// drawObject rasterises the faces of object o with their id colours.
//
// fauxgl culls by the sign of the triangle's area in normalised device
// coordinates (x right, y up) after clipping, with FrontFace deciding
// which sign is kept, and discards zero area when culling is on. With the
// projection below, a face whose outward normal n = (b−a)×(c−a) points
// towards the camera (n·a < 0) has positive area in those coordinates
// (the image's y-down flip and the camera's z-forward flip cancel), so we
// set FrontFace per face from the sign of n·a and keep culling on: every
// face is drawn whichever way it winds, and degenerate ones are dropped.
// Clipping keeps a face in its plane, so the sign holds for the clipped
// pieces too.
func (r *Renderer) drawObject(o int, m *mesh.Mesh, cullBack bool) {
	cam := r.cam[o]
	base := r.base[o]
	for fi, f := range m.Faces {
		a, b, c := cam[f[0]], cam[f[1]], cam[f[2]]
		n := r3.Cross(r3.Sub(b, a), r3.Sub(c, a))
		s := r3.Dot(n, a)
		if !(s*s > planeEps*planeEps*r3.Norm2(n)*r3.Norm2(a)) {
			continue // zero area, or seen edge-on
		}
		if s < 0 {
			r.ctx.FrontFace = fauxgl.FaceCCW
		} else {
			if cullBack {
				continue
			}
			r.ctx.FrontFace = fauxgl.FaceCW
		}
		r.shader.c = idColor(base + uint32(fi) + 1)
		r.tri.V1.Position = fauxgl.Vector{X: a.X, Y: a.Y, Z: a.Z}
		r.tri.V2.Position = fauxgl.Vector{X: b.X, Y: b.Y, Z: b.Z}
		r.tri.V3.Position = fauxgl.Vector{X: c.X, Y: c.Y, Z: c.Z}
		r.ctx.DrawTriangle(&r.tri)
	}
}

// projection returns the clip-space matrix that takes a camera-frame
// point (X, Y, Z, 1) of mesh.Intrinsics (x right, y down, z forward) to
// fauxgl's clip coordinates, such that fauxgl samples pixel (i, j)
// exactly at our pixel centre (u, v) = (i, j).
//
// Derivation. fauxgl divides clip coordinates (x, y, z, w) by w to get
// normalised device coordinates and maps them to the screen with
// Screen(W, H): sx = W/2·(x/w + 1), sy = H/2·(1 − y/w), sz = (z/w + 1)/2;
// it samples pixel (i, j) at (sx, sy) = (i + 0.5, j + 0.5) and keeps the
// smallest sz. We want sx = u + 0.5 = Fx·X/Z + Cx + 0.5 and
// sy = v + 0.5 = Fy·Y/Z + Cy + 0.5. Take w = Z, then
//
//	x = (2Fx/W)·X + ((2Cx + 1)/W − 1)·Z
//	y = −(2Fy/H)·Y + (1 − (2Cy + 1)/H)·Z
//
// and substituting gives sx = Fx·X/Z + Cx + 0.5 and
// sy = Fy·Y/Z + Cy + 0.5 as wanted. For depth take z = α·Z + β with
// z/w = −1 at Z = near and +1 at Z = far: α = (far + near)/(far − near),
// β = −2·far·near/(far − near); z/w = α + β/Z then grows with Z, so the
// depth test keeps the nearest surface, and it is affine in screen
// space, so fauxgl's linear interpolation of sz is exact. fauxgl clips to
// −w ≤ x, y, z ≤ w in homogeneous coordinates before dividing, which
// keeps only w = Z > 0, near ≤ Z ≤ far and the image rectangle: nothing
// behind the camera is drawn. (Unlike OpenGL's camera, ours looks down
// +z with y down, so w = +Z rather than −Z and no axis flip is needed
// beyond the sign of y above.)
func projection(k mesh.Intrinsics, near, far float64) fauxgl.Matrix {
	w, h := float64(k.Width), float64(k.Height)
	return fauxgl.Matrix{
		X00: 2 * k.Fx / w, X01: 0, X02: (2*k.Cx+1)/w - 1, X03: 0,
		X10: 0, X11: -2 * k.Fy / h, X12: 1 - (2*k.Cy+1)/h, X13: 0,
		X20: 0, X21: 0, X22: (far + near) / (far - near), X23: -2 * far * near / (far - near),
		X30: 0, X31: 0, X32: 1, X33: 0,
	}
}

// idShader draws every fragment of a face in one colour that encodes the
// face's global id; vertices arrive already in the camera frame.
type idShader struct {
	m fauxgl.Matrix
	c fauxgl.Color
}

func (s *idShader) Vertex(v fauxgl.Vertex) fauxgl.Vertex {
	v.Output = s.m.MulPositionW(v.Position)
	return v
}

func (s *idShader) Fragment(fauxgl.Vertex) fauxgl.Color { return s.c }

// idColor packs id into the four 8-bit channels. fauxgl converts a
// channel value c ∈ [0, 1] to uint8(c·255) (truncation), so byte k is
// sent as (k + 0.5)/255, which lands exactly on k.
func idColor(id uint32) fauxgl.Color {
	ch := func(k uint32) float64 { return (float64(k&0xff) + 0.5) / 255 }
	return fauxgl.Color{R: ch(id), G: ch(id >> 8), B: ch(id >> 16), A: ch(id >> 24)}
}

// edgeTol is the barycentric tolerance within which a neighbour's face
// may claim a pixel centre (see resolve): a pixel centre that lies on an
// edge to within 1e−9 of the face's altitude, far below a pixel for any
// face smaller than a million pixels, and far above the rounding of
// fauxgl's float64 edge functions (about 1e−13 of a pixel).
const edgeTol = 1e-9

// hit is a ray–face intersection.
type hit struct {
	o, f   int     // object, face
	t      float64 // depth z (the ray has unit z)
	bu, bv float64 // barycentric weights of the face's second and third vertex
	e1, e2 r3.Vec  // face edges b − a, c − a
}

// resolve turns the id image into the frame: exact ray–face intersection,
// attributes and shading for every covered pixel.
//
// fauxgl covers a pixel when its centre is inside or on a face, but a
// centre that lies exactly on an edge shared by two faces (as happens for
// symmetric geometry, the diagonal of a quad through the principal
// point, say) can be rejected by both through rounding, leaving a crack
// that shows what lies behind. So every pixel also tries the faces seen
// at its 4-neighbours that are nearer in fauxgl's depth buffer (all of
// them where the pixel saw nothing), and takes the nearest exact hit
// that lies on the face to within edgeTol. Faces too small to cover any
// neighbouring pixel centre cannot be recovered this way; a pixel centre
// lying exactly on one of their edges is left to fauxgl's rounding.
func (r *Renderer) resolve(dst *Frame, objs []Object, opt Options) {
	k := r.intr
	w, h := k.Width, k.Height
	pix := r.ctx.ColorBuffer.Pix
	zbuf := r.ctx.DepthBuffer
	id := func(p int) uint32 {
		q := 4 * p
		return uint32(pix[q]) | uint32(pix[q+1])<<8 | uint32(pix[q+2])<<16 | uint32(pix[q+3])<<24
	}
	sh := shading{opt: opt, light: mesh.Normalize(opt.LightDir)}
	for j := 0; j < h; j++ {
		row := j * w
		ry := (float64(j) - k.Cy) / k.Fy
		for i := 0; i < w; i++ {
			p := row + i
			d := r3.Vec{X: (float64(i) - k.Cx) / k.Fx, Y: ry, Z: 1}
			own := id(p)
			var best hit
			found := false
			if own != 0 {
				best, found = r.intersect(own-1, d, math.Inf(1), 0, math.Inf(1))
			}
			var tried [4]uint32
			nt := 0
			for nb := 0; nb < 4; nb++ {
				q := -1
				switch {
				case nb == 0 && i > 0:
					q = p - 1
				case nb == 1 && i+1 < w:
					q = p + 1
				case nb == 2 && j > 0:
					q = p - w
				case nb == 3 && j+1 < h:
					q = p + w
				}
				if q < 0 {
					continue
				}
				nid := id(q)
				if nid == 0 || nid == own || (own != 0 && zbuf[q] >= zbuf[p]) {
					continue
				}
				dup := false
				for _, t := range tried[:nt] {
					dup = dup || t == nid
				}
				if dup {
					continue
				}
				tried[nt] = nid
				nt++
				if c, ok := r.intersect(nid-1, d, edgeTol, opt.Near, opt.Far); ok && (!found || c.t < best.t) {
					best, found = c, true
				}
			}
			if found {
				r.shade(dst, p, &best, d, objs, &sh)
			} else {
				r.setEmpty(dst, p, opt.Background)
			}
		}
	}
}

func (r *Renderer) setEmpty(dst *Frame, p int, bg mesh.RGB) {
	dst.Depth[p] = 0
	dst.Object[p] = -1
	dst.Triangle[p] = -1
	dst.Normal[3*p], dst.Normal[3*p+1], dst.Normal[3*p+2] = 0, 0, 0
	c := dst.Color.Pix[4*p : 4*p+4 : 4*p+4]
	c[0], c[1], c[2], c[3] = bg.R, bg.G, bg.B, 255
}

// object returns the object index and face index of global id g
// (0-based), by binary search over the objects' first ids.
func (r *Renderer) object(g uint32) (int, int) {
	lo, hi := 0, len(r.base)-1
	for lo < hi { // last o with base[o] ≤ g
		mid := (lo + hi + 1) / 2
		if r.base[mid] <= g {
			lo = mid
		} else {
			hi = mid - 1
		}
	}
	return lo, int(g - r.base[lo])
}

// intersect intersects the ray from the camera centre along d (unit z)
// with the plane of face g (Möller & Trumbore 1997). It reports a hit
// when the barycentric weights are all ≥ −tol and near ≤ t ≤ far; with
// tol = +Inf only the plane matters (the rasteriser has already decided
// coverage). A ray parallel to the plane or meeting it behind the camera
// is no hit.
func (r *Renderer) intersect(g uint32, d r3.Vec, tol, near, far float64) (hit, bool) {
	o, fi := r.object(g)
	cam := r.cam[o]
	f := r.faces[o][fi]
	a, b, c := cam[f[0]], cam[f[1]], cam[f[2]]
	e1, e2 := r3.Sub(b, a), r3.Sub(c, a)
	pv := r3.Cross(d, e2)
	det := r3.Dot(e1, pv)
	if det == 0 {
		return hit{}, false
	}
	inv := 1 / det
	tv := r3.Scale(-1, a)
	bu := r3.Dot(tv, pv) * inv
	qv := r3.Cross(tv, e1)
	bv := r3.Dot(d, qv) * inv
	t := r3.Dot(e2, qv) * inv // = z, since d.Z = 1
	if !(t > 0) || math.IsInf(t, 0) || t < near || t > far {
		return hit{}, false
	}
	if !(bu >= -tol && bv >= -tol && 1-bu-bv >= -tol) {
		return hit{}, false
	}
	return hit{o: o, f: fi, t: t, bu: bu, bv: bv, e1: e1, e2: e2}, true
}

// shade fills pixel p, seen along ray d (unit z), from hit h.
func (r *Renderer) shade(dst *Frame, p int, h *hit, d r3.Vec, objs []Object, sh *shading) {
	obj := &objs[h.o]
	m := obj.Mesh
	f := m.Faces[h.f]
	// Barycentric weights, clamped into the face for attributes: the
	// rasteriser may claim a pixel centre a rounding error outside.
	w0, w1, w2 := clampBary(1-h.bu-h.bv, h.bu, h.bv)

	nf := unit(r3.Cross(h.e1, h.e2))
	flip := r3.Dot(nf, d) > 0 // back face: turn the normal to the camera
	if flip {
		nf = r3.Scale(-1, nf)
	}
	n := nf
	if m.Normals != nil {
		nm := r3.Add(r3.Add(r3.Scale(w0, m.Normals[f[0]]), r3.Scale(w1, m.Normals[f[1]])), r3.Scale(w2, m.Normals[f[2]]))
		ni := unit(obj.ModelToCam.Rotate(nm))
		if flip {
			ni = r3.Scale(-1, ni)
		}
		// Interpolated normals can lean away from the camera near a
		// silhouette; keep the invariant "facing the camera" with the
		// face normal there.
		if r3.Dot(ni, d) < 0 {
			n = ni
		}
	}
	var albedo [3]float64
	if m.Colors != nil {
		ca, cb, cc := m.Colors[f[0]], m.Colors[f[1]], m.Colors[f[2]]
		albedo = [3]float64{
			w0*float64(ca.R) + w1*float64(cb.R) + w2*float64(cc.R),
			w0*float64(ca.G) + w1*float64(cb.G) + w2*float64(cc.G),
			w0*float64(ca.B) + w1*float64(cb.B) + w2*float64(cc.B),
		}
	} else {
		albedo = [3]float64{float64(obj.Color.R), float64(obj.Color.G), float64(obj.Color.B)}
	}

	dst.Depth[p] = float32(h.t)
	dst.Object[p] = int32(h.o)
	dst.Triangle[p] = int32(h.f)
	dst.Normal[3*p], dst.Normal[3*p+1], dst.Normal[3*p+2] = float32(n.X), float32(n.Y), float32(n.Z)
	sh.shade(dst.Color.Pix[4*p:4*p+4:4*p+4], albedo, n, d)
}

func clampBary(w0, w1, w2 float64) (float64, float64, float64) {
	w0, w1, w2 = max(w0, 0), max(w1, 0), max(w2, 0)
	s := w0 + w1 + w2
	if !(s > 0) {
		return 1.0 / 3, 1.0 / 3, 1.0 / 3
	}
	return w0 / s, w1 / s, w2 / s
}

// shading is the lighting model: ambient + Lambert (Lambert's cosine
// law) + a white Blinn–Phong highlight, then gain and white balance.
// It works directly on the 8-bit values, as a simple stand-in for a
// camera's response.
type shading struct {
	opt   Options
	light r3.Vec // unit, or zero
}

// pow returns c^Shininess, by repeated squaring when the exponent is a
// small whole number (the default 32 takes five multiplications instead
// of a math.Pow call per pixel).
func (s *shading) pow(c float64) float64 {
	e := s.opt.Shininess
	if e != math.Trunc(e) || e > 1024 {
		return math.Pow(c, e)
	}
	r := 1.0
	for n := int(e); n > 0; n >>= 1 {
		if n&1 == 1 {
			r *= c
		}
		c *= c
	}
	return r
}

func (s *shading) shade(out []uint8, albedo [3]float64, n, d r3.Vec) {
	lam := max(r3.Dot(n, s.light), 0)
	k := s.opt.Ambient + s.opt.Diffuse*lam
	var spec float64
	if lam > 0 && s.opt.Specular > 0 {
		view := unit(r3.Scale(-1, d))
		h := unit(r3.Add(s.light, view))
		if c := r3.Dot(n, h); c > 0 {
			spec = 255 * s.opt.Specular * s.pow(c)
		}
	}
	for ch := 0; ch < 3; ch++ {
		v := (albedo[ch]*k + spec) * s.opt.Gain * s.opt.WhiteBalance[ch]
		out[ch] = to8(v)
	}
	out[3] = 255
}

// to8 rounds v to the nearest 8-bit level, clamping into [0, 255].
func to8(v float64) uint8 {
	switch {
	case !(v > 0):
		return 0
	case v >= 255:
		return 255
	}
	return uint8(v + 0.5)
}

// unit is mesh.Normalize with a plain square root (r3.Norm goes through
// math.Hypot, several times slower in the per-pixel loops); the zero
// vector stays zero.
func unit(v r3.Vec) r3.Vec {
	n := math.Sqrt(v.X*v.X + v.Y*v.Y + v.Z*v.Z)
	if n == 0 {
		return r3.Vec{}
	}
	return r3.Vec{X: v.X / n, Y: v.Y / n, Z: v.Z / n}
}

func finiteVec(v r3.Vec) bool {
	return !math.IsNaN(v.X) && !math.IsNaN(v.Y) && !math.IsNaN(v.Z) &&
		!math.IsInf(v.X, 0) && !math.IsInf(v.Y, 0) && !math.IsInf(v.Z, 0)
}

func finitePose(p mesh.Pose) bool {
	for _, row := range p.R {
		if !finiteVec(r3.Vec{X: row[0], Y: row[1], Z: row[2]}) {
			return false
		}
	}
	return finiteVec(p.T)
}
