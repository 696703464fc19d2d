package render

import (
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// benchScene is a 50,000-triangle sphere (radius 8 cm at 0.6 m, about a
// sixth of the image) in front of a two-triangle wall, at 640×480.
func benchScene() (mesh.Intrinsics, []Object) {
	k := mesh.DefaultIntrinsics()
	s := uvSphere(0.08, 126, 200) // 2·200·125 = 50,000 faces
	return k, []Object{
		{Mesh: s, ModelToCam: mesh.PoseFromAxisAngle(r3.Vec{X: 1, Y: 1}, 0.7, r3.Vec{X: 0.02, Z: 0.6}), Color: mesh.RGB{R: 180, G: 140, B: 60}},
		{Mesh: quadMesh(2, 2), ModelToCam: translate(0, 0, 1.2), Color: mesh.RGB{R: 90, G: 90, B: 100}},
	}
}

// BenchmarkRender draws benchScene into a reused frame.
func BenchmarkRender(b *testing.B) {
	k, objs := benchScene()
	r, err := NewRenderer(k)
	if err != nil {
		b.Fatal(err)
	}
	dst := &Frame{}
	opt := DefaultOptions()
	if err := r.RenderInto(dst, objs, opt); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := r.RenderInto(dst, objs, opt); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "frames/s")
}

// BenchmarkNoise applies the default noise model to a rendered 640×480
// frame, reusing the destination.
func BenchmarkNoise(b *testing.B) {
	k, objs := benchScene()
	clean, err := Render(k, objs, DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	s, err := NewSensor(DefaultNoiseOptions())
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	dst := &Frame{}
	if err := s.Apply(dst, clean, rng); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := s.Apply(dst, clean, rng); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "frames/s")
}
