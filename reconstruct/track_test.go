package reconstruct

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// sceneDepth ray-casts a table plane (world y = 0, up is −y, 1.2 m
// square) and spheres resting on or above it, exact depth per pixel.
func sceneDepth(intr mesh.Intrinsics, camToWorld mesh.Pose, spheres []testSphere) []float32 {
	depth := make([]float32, intr.Width*intr.Height)
	o := camToWorld.T
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			d := camToWorld.Rotate(intr.Ray(float64(x), float64(y))) // unit z in camera: t is depth
			best := math.Inf(1)
			if d.Y > 0 {
				if t := -o.Y / d.Y; t > 0 {
					if p := r3.Add(o, r3.Scale(t, d)); math.Abs(p.X) < 0.6 && math.Abs(p.Z) < 0.6 {
						best = t
					}
				}
			}
			for _, s := range spheres {
				oc := r3.Sub(o, s.c)
				a, b, q := r3.Dot(d, d), 2*r3.Dot(d, oc), r3.Dot(oc, oc)-s.r*s.r
				if disc := b*b - 4*a*q; disc >= 0 {
					if t := (-b - math.Sqrt(disc)) / (2 * a); t > 0 && t < best {
						best = t
					}
				}
			}
			if !math.IsInf(best, 1) {
				depth[y*intr.Width+x] = float32(best)
			}
		}
	}
	return depth
}

// TestTrackerFollowsKnownPath moves a camera around a table scene on a
// known path and checks the tracked poses against it. Exact depth: the
// remaining error comes from the volume's discretisation (4 mm voxels)
// averaged over thousands of pairs.
func TestTrackerFollowsKnownPath(t *testing.T) {
	intr := mesh.Intrinsics{Width: 320, Height: 240, Fx: 262.5, Fy: 262.5, Cx: 159.5, Cy: 119.5}
	spheres := []testSphere{
		{r3.Vec{Y: -0.04}, 0.04}, {r3.Vec{X: 0.12, Y: -0.03, Z: 0.05}, 0.03},
		{r3.Vec{X: -0.1, Y: -0.025, Z: 0.1}, 0.025}, {r3.Vec{X: 0.05, Y: -0.05, Z: -0.12}, 0.05},
		{r3.Vec{X: -0.15, Y: -0.02, Z: -0.08}, 0.02},
	}
	const frames = 20
	var truth []mesh.Pose
	for k := 0; k < frames; k++ {
		a := float64(k) * 2 * math.Pi / 180 // 2° per frame around the table
		el := (35 + 5*math.Sin(float64(k)/3)) * math.Pi / 180
		dist := 0.5 + 0.03*math.Sin(float64(k)/4)
		eye := r3.Vec{X: dist * math.Cos(el) * math.Sin(a), Y: -dist * math.Sin(el), Z: -dist * math.Cos(el) * math.Cos(a)}
		p, err := mesh.LookAt(eye, r3.Vec{X: 0.01 * math.Sin(float64(k)), Y: -0.02}, r3.Vec{Y: -1})
		if err != nil {
			t.Fatal(err)
		}
		truth = append(truth, p)
	}
	// Render in the table's frame; track in the sweep's world frame, which
	// is frame 0's camera frame.
	tableCams := append([]mesh.Pose(nil), truth...)
	w0 := truth[0].Inv()
	for k := range truth {
		truth[k] = w0.Mul(truth[k])
	}
	opt := DefaultTSDFOptions()
	opt.VoxelSize = 0.004
	vol, err := NewVolume(opt)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := NewTracker(vol, intr, DefaultTrackOptions())
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	pose := mesh.Identity()
	prev := pose
	for k := 0; k < frames; k++ {
		depth := sceneDepth(intr, tableCams[k], spheres)
		if k > 0 {
			// Constant-velocity prediction.
			pred := pose.Mul(prev.Inv().Mul(pose))
			res, err := tr.Track(ctx, depth, nil, pred)
			if err != nil {
				t.Fatal(err)
			}
			if res.Lost {
				t.Fatalf("frame %d lost: %s", k, res.Reason)
			}
			prev, pose = pose, res.CamToWorld
			dT := r3.Norm(r3.Sub(pose.T, truth[k].T))
			dR := mesh.RotationAngle(pose, truth[k])
			// Target of the handheld rig: ≤ 2 mm and ≤ 0.5° at every frame;
			// exact depth should do far better.
			if dT > 0.001 || dR > 0.2*math.Pi/180 {
				t.Errorf("frame %d: tracked pose off by %.2f mm, %.3f° (rms %.2f mm, inliers %.0f%%)", k, dT*1000, dR*180/math.Pi, res.RMS*1000, res.InlierRatio*100)
			}
		}
		im := &DepthImage{Intr: intr, Depth: depth, Weight: MeasurementWeights(depth, intr, DefaultWeightOptions(), nil)}
		if _, err := vol.Integrate(ctx, im, pose); err != nil {
			t.Fatal(err)
		}
		tr.UpdateModel(ctx, pose)
	}
}

// TestTrackerLost feeds a frame of a different scene: it must be
// reported lost, not placed.
func TestTrackerLost(t *testing.T) {
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131, Fy: 131, Cx: 79.5, Cy: 59.5}
	el := 35 * math.Pi / 180
	cam, _ := mesh.LookAt(r3.Vec{Y: -0.5 * math.Sin(el), Z: -0.5 * math.Cos(el)}, r3.Vec{}, r3.Vec{Y: -1})
	vol, _ := NewVolume(DefaultTSDFOptions())
	tr, _ := NewTracker(vol, intr, DefaultTrackOptions())
	ctx := context.Background()
	d0 := sceneDepth(intr, cam, []testSphere{{r3.Vec{Y: -0.04}, 0.04}})
	vol.Integrate(ctx, &DepthImage{Intr: intr, Depth: d0}, mesh.Identity())
	tr.UpdateModel(ctx, mesh.Identity())
	// A wall 0.3 m away fills the view.
	wall := make([]float32, intr.Width*intr.Height)
	for i := range wall {
		wall[i] = 0.3
	}
	res, err := tr.Track(ctx, wall, nil, mesh.Identity())
	if err != nil {
		t.Fatal(err)
	}
	if !res.Lost || res.Reason == "" {
		t.Fatalf("unrelated frame placed: %+v", res)
	}
}

// TestTrackColorPinsTurnOnTexturedPlate: a flat, textured disc (1 m
// across, a table top filling the lower image) turned by 1° about its
// own normal (the camera circling it, about 8 mm) leaves the depth image
// unchanged, so depth alone cannot see the motion; the colour term
// against the first frame as keyframe recovers it. (On the 0.28 m disc
// of plateScene's default, at one depth, a yaw and a sideways shift
// look nearly alike in the image and the estimate slid 1.3 mm along
// that combination, measured with one pass of the pyramid; the wider
// table's depth range tells them apart.) The scene and the true pose
// are closed-form (plateScene: ray–plane intersection; the turn's
// rigid motion for the truth).
// Tolerance 1 mm and 0.1°: the texture's 13 mm shortest wavelength is
// imaged at 12 pixels, so a tenth of a pixel of registration (about
// 0.1 mm on the plate) moves the camera by under 1 mm at 0.55 m.
func TestTrackColorPinsTurnOnTexturedPlate(t *testing.T) {
	s := newPlateScene()
	s.axis = [2]float64{}
	s.radius = 0.5 // a table top filling the lower image: depths 0.4–1 m
	const turn = 1 * math.Pi / 180
	v0, v1 := s.view(0, 0), s.view(1, turn)
	// The plate turns by R about the line through p0 along up, so a
	// world point x appears at R(x − p0) + p0 in the new camera; the
	// camera's pose is the inverse of that map.
	r := mesh.RotationFromAxisAngle(s.up, turn)
	truth := mesh.Pose{R: r, T: r3.Sub(s.p0, r.MulVec(s.p0))}.Inv()
	ctx := context.Background()
	track := func(colour bool) (mesh.Pose, bool) {
		tr := plateTracker(t, s, v0, colour)
		res, err := tr.TrackColor(ctx, v1.Depth, Luminance(v1.Color, nil), nil, mesh.Identity())
		if err != nil {
			t.Fatal(err)
		}
		if res.Lost {
			if colour {
				t.Fatalf("with colour: lost: %s", res.Reason)
			}
			return res.CamToWorld, true
		}
		if colour && res.KeyOverlap < 0.9 {
			t.Errorf("overlap with the keyframe %.2f, want ≥ 0.9 for a 1° turn", res.KeyOverlap)
		}
		return res.CamToWorld, false
	}
	moved := r3.Norm(truth.T)
	got, _ := track(true)
	dT, dR := r3.Norm(r3.Sub(got.T, truth.T)), mesh.RotationAngle(got, truth)
	t.Logf("camera moved %.1f mm; with colour off by %.3f mm %.4f°", moved*1000, dT*1000, dR*180/math.Pi)
	if dT > 0.001 || dR > 0.1*math.Pi/180 {
		t.Errorf("with colour: off by %.2f mm, %.3f°", dT*1000, dR*180/math.Pi)
	}
	// Depth alone sees a plane, which leaves three degrees of freedom
	// free: the frame is lost or placed far from the truth.
	if depthOnly, lost := track(false); !lost {
		if d := r3.Norm(r3.Sub(depthOnly.T, truth.T)); d < moved/2 {
			t.Errorf("depth alone placed the frame %.1f mm from the truth, %.1f mm away: the scene was meant to leave the turn unseen", d*1000, moved*1000)
		}
	}
}

// TestColourTermChunks checks that the colour term's two-step loop
// (colourTerm.addRange: project a chunk of samples, then add the ones
// whose keyframe pixels all have a gradient) adds exactly what one
// sample-by-sample loop adds, in the same order, for ranges that start
// and end inside chunks and for every step: the sums must agree to the
// bit. The frames are plateScene's textured table turned by 1°.
func TestColourTermChunks(t *testing.T) {
	s := newPlateScene()
	s.axis = [2]float64{}
	s.radius = 0.5
	v0, v1 := s.view(0, 0), s.view(1, 1*math.Pi/180)
	tr := plateTracker(t, s, v0, true)
	if _, err := tr.TrackColor(context.Background(), v1.Depth, Luminance(v1.Color, nil), nil, mesh.Identity()); err != nil {
		t.Fatal(err)
	}
	// a pose a little off, so that the pairs are not all at zero residual
	pose := mesh.PoseFromAxisAngle(r3.Vec{Y: 1}, 0.002, r3.Vec{X: 0.001})
	cw := newAffine(pose)
	samples := tr.levels[0].samples
	n := len(samples)
	if n < 1000 {
		t.Fatalf("only %d samples", n)
	}
	for _, step := range []int{1, 2, 3} {
		ct := tr.colourTerm(0, pose, [2]float64{1.1, -2}, step)
		mid := n / 2 / step * step
		// whole; starting and ending inside chunks; one chunk and one
		// sample more; a single sample
		for _, r := range [][2]int{{0, n}, {step * 7, n - 5}, {mid, mid + 64*step + 1}, {mid + 3*step, mid + 3*step + 1}} {
			from, to := r[0], r[1]
			var got, want photoPart
			ct.addRange(&got, samples, from, to, step, &cw)
			// one sample at a time
			ki := &ct.kl.intr
			kw := ki.Width
			for si := from; si < to; si += step {
				pk := ct.camToKey.apply(samples[si].v)
				if pk.Z <= 0 {
					continue
				}
				want.cand++
				uf, vf := ki.Fx*pk.X/pk.Z+ki.Cx, ki.Fy*pk.Y/pk.Z+ki.Cy
				if !(uf >= 1 && vf >= 1) || int(uf)+2 >= kw || int(vf)+2 >= ki.Height {
					continue
				}
				j := int(vf)*kw + int(uf)
				pix := ct.kl.pix
				if !(pix[j].depth > 0 && pix[j+1].depth > 0 && pix[j+kw].depth > 0 && pix[j+kw+1].depth > 0) {
					continue
				}
				ct.add(&want, &samples[si], cw.apply(samples[si].v), &colourHit{si: int32(si), j: int32(j), uf: uf, vf: vf, pk: pk})
			}
			if want.pair == 0 && to-from > 1 {
				t.Fatalf("step %d, samples %d–%d: no pairs; the test needs some", step, from, to)
			}
			if got != want {
				t.Errorf("step %d, samples %d–%d: chunked sums differ: %d/%d pairs of %d/%d candidates", step, from, to, got.pair, want.pair, got.cand, want.cand)
			}
		}
	}
}

// plateTracker returns a tracker (colour on when colour, ColorSigma 3)
// whose model is plate view v0 fused into a 4 mm volume at the
// identity, with v0 as its keyframe.
func plateTracker(t *testing.T, s *plateScene, v0 PlateView, colour bool) *Tracker {
	t.Helper()
	ctx := context.Background()
	opt := DefaultTSDFOptions()
	opt.VoxelSize = 0.004
	vol, err := NewVolume(opt)
	if err != nil {
		t.Fatal(err)
	}
	to := DefaultTrackOptions()
	if colour {
		to.ColorSigma = 3
	}
	tr, err := NewTracker(vol, s.intr, to)
	if err != nil {
		t.Fatal(err)
	}
	im := &DepthImage{Intr: s.intr, Depth: v0.Depth, Weight: MeasurementWeights(v0.Depth, s.intr, DefaultWeightOptions(), nil)}
	if _, err := vol.Integrate(ctx, im, mesh.Identity()); err != nil {
		t.Fatal(err)
	}
	tr.UpdateModel(ctx, mesh.Identity())
	tr.SetKeyframe(Luminance(v0.Color, nil), v0.Depth, mesh.Identity())
	return tr
}

// TestDownDepthKeepsObliqueSurfaces halves the depth image of a plane
// seen at 75° (through (0, 0, 0.8 m), its normal turned 75° from the
// optical axis) and compares each coarse depth with the plane's exact
// depth on the coarse pixel's ray (ray–plane intersection, with the
// coarse intrinsics of mesh.Intrinsics.Scaled). On a plane 1/z is
// affine in the pixel coordinates, so the mean of a block's four depths
// differs from the depth at its centre only by z's curvature across a
// pixel, about (Δz)²/z for a row's step Δz: 0.06 mm at 0.8 m (7 mm a
// row), 0.1 mm at 2 m (14 mm a row); 0.25 mm allows for that and
// float32 (0.15 mm measured). Keeping only the pixels within 3σ_z of
// the block's nearest (4.5 mm at 0.8 m, less than a row's step) moved
// the coarse depth toward the camera by up to 17 mm. A block across a real discontinuity (10 cm) still keeps
// its near pixels alone, and one across a step within the noise
// averages all four.
func TestDownDepthKeepsObliqueSurfaces(t *testing.T) {
	intr := mesh.Intrinsics{Width: 640, Height: 480, Fx: 525, Fy: 525, Cx: 319.5, Cy: 239.5}
	th := 75 * math.Pi / 180
	n := r3.Vec{Y: math.Sin(th), Z: math.Cos(th)}
	planeDepth := func(k mesh.Intrinsics, u, v float64) float64 {
		den := r3.Dot(n, k.Ray(u, v))
		if den <= 0 {
			return 0
		}
		if z := 0.8 * n.Z / den; z > 0.4 && z < 2 {
			return z
		}
		return 0
	}
	depth := make([]float32, intr.Width*intr.Height)
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			depth[y*intr.Width+x] = float32(planeDepth(intr, float64(x), float64(y)))
		}
	}
	tr, err := NewTracker(nil, intr, DefaultTrackOptions())
	if err != nil {
		t.Fatal(err)
	}
	coarse := intr.Scaled(2)
	dst := make([]float32, coarse.Width*coarse.Height)
	downDepth(depth, intr.Width, dst, coarse.Width, coarse.Height, tr.opt.Workers)
	worst, checked := 0.0, 0
	for y := 0; y < coarse.Height; y++ {
		for x := 0; x < coarse.Width; x++ {
			i := 2*y*intr.Width + 2*x
			if depth[i] == 0 || depth[i+1] == 0 || depth[i+intr.Width] == 0 || depth[i+intr.Width+1] == 0 {
				continue
			}
			exact := planeDepth(coarse, float64(x), float64(y))
			worst = math.Max(worst, math.Abs(float64(dst[y*coarse.Width+x])-exact))
			checked++
		}
	}
	if checked < 10000 || worst > 0.25e-3 {
		t.Errorf("oblique plane: coarse depth off by up to %.3f mm over %d pixels (≤ 0.25 mm)", worst*1000, checked)
	}

	// Two blocks: a 10 cm step (keep the near pixels) and a 1 mm one
	// (average all four).
	small := mesh.Intrinsics{Width: 4, Height: 2, Fx: 525, Fy: 525, Cx: 1.5, Cy: 0.5}
	in := []float32{0.5, 0.6, 0.5, 0.501, 0.5, 0.6, 0.5, 0.501}
	out := make([]float32, 2)
	downDepth(in, small.Width, out, 2, 1, tr.opt.Workers)
	if out[0] != 0.5 || math.Abs(float64(out[1])-0.5005) > 1e-6 {
		t.Errorf("blocks across a 10 cm and a 1 mm step: got %v, want [0.5 0.5005]", out)
	}
}

// TestBilateralDepth checks the tracker's depth filter against the
// variance of a weighted mean of independent samples, σ²·Σw²/(Σw)²
// (standard statistics): on a face-on plane with noise far below the
// range σ (0.05 mm against 2σ_z = 2.4 mm at 0.5 m, so every range weight
// is within 0.1 % of 1) the two passes are Gaussian smoothing by the
// 5-tap kernel in x and then in y, whose weights multiply, so the noise
// falls by (√Σw²/Σw)² — 3 % allows for the 300 000 samples' own spread
// and those range weights. A 10 cm step keeps both sides apart, and
// holes stay holes without pulling their neighbours.
func TestBilateralDepth(t *testing.T) {
	const w, h = 640, 480
	rng := rand.New(rand.NewPCG(1, 2))
	src := make([]float32, w*h)
	for i := range src {
		src[i] = float32(0.5 + 0.00005*rng.NormFloat64())
	}
	dst, tmp := make([]float32, w*h), make([]float32, w*h)
	bilateralDepth(src, dst, tmp, w, h, 2, 0)
	var s1, s2 float64
	n := 0
	for y := bilateralRadius; y < h-bilateralRadius; y++ {
		for x := bilateralRadius; x < w-bilateralRadius; x++ {
			d := float64(dst[y*w+x]) - 0.5
			s1 += d
			s2 += d * d
			n++
		}
	}
	got := math.Sqrt(s2/float64(n) - (s1/float64(n))*(s1/float64(n)))
	var sw, sw2 float64
	for d := -bilateralRadius; d <= bilateralRadius; d++ {
		v := math.Exp(-float64(d*d) / (2 * bilateralSpatial * bilateralSpatial))
		sw += v
		sw2 += v * v
	}
	want := 0.00005 * (sw2 / (sw * sw))
	if math.Abs(got/want-1) > 0.03 {
		t.Errorf("noise after the filter %.4g m, want %.4g (σ·Σw²/(Σw)²)", got, want)
	}

	// A 10 cm step down the middle, and a hole.
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			z := float32(0.5)
			if x >= w/2 {
				z = 0.6
			}
			src[y*w+x] = z
		}
	}
	src[100*w+100] = 0
	bilateralDepth(src, dst, tmp, w, h, 2, 0)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			i := y*w + x
			if math.Abs(float64(dst[i]-src[i])) > 1e-6 {
				t.Fatalf("pixel (%d, %d): %v, want %v", x, y, dst[i], src[i])
			}
		}
	}
}

// TestBilateralDepthPlain checks bilateralDepth's unrolled rows and
// columns against the filter written out pixel by pixel (the definition
// in its comment), to the bit: on a 64×48 image of noisy steps, holes
// and ramps, with 1 and 3 workers.
func TestBilateralDepthPlain(t *testing.T) {
	const w, h, k = 64, 48, 2.0
	rng := rand.New(rand.NewPCG(7, 8))
	src := make([]float32, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			z := 0.4 + 0.002*float64(x) // a ramp
			if y > h/2 {
				z += 0.05 // a step
			}
			z += 0.002 * rng.NormFloat64()
			if rng.IntN(10) == 0 {
				z = 0 // a hole
			}
			src[y*w+x] = float32(z)
		}
	}
	var spatial [2*bilateralRadius + 1]float32
	for d := -bilateralRadius; d <= bilateralRadius; d++ {
		spatial[d+bilateralRadius] = float32(math.Exp(-float64(d*d) / (2 * bilateralSpatial * bilateralSpatial)))
	}
	// pass filters one pixel of img along (dx, dy).
	pass := func(img []float32, x, y, dx, dy int) float32 {
		z := img[y*w+x]
		if !(z > 0) {
			return 0
		}
		scale := float32(rangeSteps / (3 * k * axialSigma(float64(z), 0)))
		var sw, sz float32
		for d := -bilateralRadius; d <= bilateralRadius; d++ {
			xx, yy := x+d*dx, y+d*dy
			if xx < 0 || yy < 0 || xx >= w || yy >= h {
				continue
			}
			q := img[yy*w+xx]
			u := abs32(q-z) * scale
			if !(u < rangeSteps) {
				continue
			}
			wt := spatial[d+bilateralRadius] * rangeTable[int(u)]
			sw += wt
			sz += wt * q
		}
		return sz / sw
	}
	rows, want := make([]float32, w*h), make([]float32, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			rows[y*w+x] = pass(src, x, y, 1, 0)
		}
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			want[y*w+x] = pass(rows, x, y, 0, 1)
		}
	}
	for _, workers := range []int{1, 3} {
		dst, tmp := make([]float32, w*h), make([]float32, w*h)
		bilateralDepth(src, dst, tmp, w, h, k, workers)
		for i := range want {
			if math.Float32bits(dst[i]) != math.Float32bits(want[i]) {
				t.Fatalf("workers %d, pixel (%d, %d): %v, want %v", workers, i%w, i/w, dst[i], want[i])
			}
		}
	}
}

// TestVertexNormalMaps checks the normals of a plane seen at an angle
// against the plane's own normal (analytic geometry: a point-normal
// plane n·p = d, cut by each pixel's ray), and the whole maps, holes
// and a depth jump included, against the estimator written out pixel
// by pixel with no stepping shortcut, to the bit, at the steps and
// spans of the tracker's levels.
func TestVertexNormalMaps(t *testing.T) {
	intr := mesh.Intrinsics{Width: 83, Height: 61, Fx: 70, Fy: 70, Cx: 41.5, Cy: 30}
	n := r3.Unit(r3.Vec{X: 0.03, Y: -0.1, Z: -1}) // faces the camera
	d := n.Z * 0.5                                // through (0, 0, 0.5)
	depth := make([]float32, intr.Width*intr.Height)
	r := rand.New(rand.NewPCG(3, 4))
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			ray := r3.Vec{X: (float64(x) - intr.Cx) / intr.Fx, Y: (float64(y) - intr.Cy) / intr.Fy, Z: 1}
			depth[y*intr.Width+x] = float32(d / r3.Dot(n, ray))
		}
	}
	planeOnly := make([]float32, len(depth))
	copy(planeOnly, depth)
	for i := range depth {
		if r.Float64() < 0.03 {
			depth[i] = 0 // dropouts
		}
		if i/intr.Width > 40 {
			depth[i] *= 1.2 // a depth jump past row 40
		}
	}
	plain := func(depth []float32, span, step int) ([]r3.Vec, int) {
		w, h := intr.Width, intr.Height
		vert := make([]r3.Vec, w*h)
		norm := make([]r3.Vec, w*h)
		for i, z := range depth {
			if z > 0 {
				vert[i] = intr.BackProject(float64(i%w), float64(i/w), float64(z))
			}
		}
		valid := 0
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				i := y*w + x
				z := depth[i]
				if x%step != 0 || y%step != 0 || z <= 0 || x < span || y < span || x >= w-span || y >= h-span {
					continue
				}
				l, r, u, dn := depth[i-span], depth[i+span], depth[i-span*w], depth[i+span*w]
				jump := 0.05 * z
				if l <= 0 || r <= 0 || u <= 0 || dn <= 0 || abs32(l-z) > jump || abs32(r-z) > jump || abs32(u-z) > jump || abs32(dn-z) > jump {
					continue
				}
				c := r3.Cross(r3.Sub(vert[i+span], vert[i-span]), r3.Sub(vert[i+span*w], vert[i-span*w]))
				nn := r3.Dot(c, c)
				if nn == 0 {
					continue
				}
				s := 1 / math.Sqrt(nn)
				if r3.Dot(c, vert[i]) > 0 {
					s = -s
				}
				norm[i] = r3.Scale(s, c)
				valid++
			}
		}
		return norm, valid
	}
	for _, sp := range [][2]int{{3, 2}, {1, 1}, {1, 2}, {2, 3}} {
		span, step := sp[0], sp[1]
		vert := make([]r3.Vec, len(depth))
		norm := make([]r3.Vec, len(depth))
		for i := range norm {
			norm[i] = r3.Vec{X: 9} // stale values must go
		}
		valid := vertexNormalMaps(depth, intr, vert, norm, span, step, 2)
		want, wantValid := plain(depth, span, step)
		if valid != wantValid {
			t.Errorf("span %d step %d: %d normals, want %d", span, step, valid, wantValid)
		}
		for i := range want {
			if norm[i] != want[i] {
				t.Fatalf("span %d step %d: pixel %d: normal %v, want %v", span, step, i, norm[i], want[i])
			}
		}
		// The plane alone: every normal is the plane's, to the float32
		// rounding of depth (relative 6e-8, over differences spanning
		// 2·span pixels: well under 1e-4).
		valid = vertexNormalMaps(planeOnly, intr, vert, norm, span, step, 1)
		if valid == 0 {
			t.Fatalf("span %d step %d: no normal on the plane", span, step)
		}
		for i, m := range norm {
			if m != (r3.Vec{}) && r3.Norm(r3.Sub(m, n)) > 1e-4 {
				t.Fatalf("span %d step %d: pixel %d: normal %v, the plane's %v", span, step, i, m, n)
			}
		}
	}
}
