package render

import (
	"bytes"
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

// BenchmarkWriteDepthPNG encodes the depth of a rendered 640×480 frame
// in millimetres.
func BenchmarkWriteDepthPNG(b *testing.B) {
	k, objs := benchScene()
	f, err := Render(k, objs, DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	var buf bytes.Buffer
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		buf.Reset()
		if _, err := WriteDepthPNG(&buf, f.Depth, k.Width, k.Height, 0.001); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(buf.Len()), "bytes")
}

// BenchmarkReadDepthPNG decodes that file back to metres.
func BenchmarkReadDepthPNG(b *testing.B) {
	k, objs := benchScene()
	f, err := Render(k, objs, DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	var buf bytes.Buffer
	if _, err := WriteDepthPNG(&buf, f.Depth, k.Width, k.Height, 0.001); err != nil {
		b.Fatal(err)
	}
	data := buf.Bytes()
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, _, _, err := ReadDepthPNG(bytes.NewReader(data), 0.001); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkWriteColorPNG encodes the colour of a rendered 640×480 frame.
func BenchmarkWriteColorPNG(b *testing.B) {
	k, objs := benchScene()
	f, err := Render(k, objs, DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	var buf bytes.Buffer
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		buf.Reset()
		if err := WriteColorPNG(&buf, f.Color); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(buf.Len()), "bytes")
}
