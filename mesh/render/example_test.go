package render_test

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// A 20 cm square facing the camera at 0.8 m. Its half-width projects to
// 0.1·525/0.8 = 65.6 pixels either side of the principal point 319.5, so
// it covers the pixel centres 254..385 in u (and 174..305 in v): 132²
// pixels.
func ExampleRender() {
	square := &mesh.Mesh{
		Vertices: []r3.Vec{{X: -0.1, Y: -0.1}, {X: 0.1, Y: -0.1}, {X: 0.1, Y: 0.1}, {X: -0.1, Y: 0.1}},
		Faces:    []mesh.Face{{0, 3, 2}, {0, 2, 1}},
	}
	pose := mesh.Identity()
	pose.T = r3.Vec{Z: 0.8}
	frame, err := render.Render(mesh.DefaultIntrinsics(), []render.Object{
		{Mesh: square, ModelToCam: pose, Color: mesh.RGB{R: 200, G: 60, B: 40}},
	}, render.DefaultOptions())
	if err != nil {
		fmt.Println(err)
		return
	}
	covered := 0
	for _, z := range frame.Depth {
		if z > 0 {
			covered++
		}
	}
	p := 240*640 + 320
	fmt.Printf("depth %.4f m, object %d, normal %.1f\n", frame.Depth[p], frame.Object[p], frame.NormalAt(320, 240))
	fmt.Println("pixels covered:", covered, "=", 132*132)

	// The same frame as a structured-light sensor would see it.
	noisy, err := render.AddNoise(frame, render.DefaultNoiseOptions(), rand.New(rand.NewPCG(1, 2)))
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("noise model σ at 0.8 m: %.2f mm; noisy depth within 4σ: %v\n",
		render.AxialSigma(0.8, 0)*1e3, noisy.Depth[p] == 0 || abs(float64(noisy.Depth[p])-0.8) < 4*render.AxialSigma(0.8, 0))
	// Output:
	// depth 0.8000 m, object 0, normal {0.0 0.0 -1.0}
	// pixels covered: 17424 = 17424
	// noise model σ at 0.8 m: 1.50 mm; noisy depth within 4σ: true
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

// The worked values of the axial noise model (Nguyen, Izadi & Lovell
// 2012): about 1.2 mm at 0.5 m and 1.9 mm at 1 m face-on, growing
// towards grazing angles. At 60°, θ/(π/2 − θ) = 2, so the angular term
// adds 0.0004/√z m: 0.57 mm at 0.5 m, 0.40 mm at 1 m, 0.28 mm at 2 m.
func ExampleAxialSigma() {
	for _, z := range []float64{0.5, 1, 2} {
		fmt.Printf("z = %.1f m: %.2f mm face-on, %.2f mm at 60°\n", z, render.AxialSigma(z, 0)*1e3, render.AxialSigma(z, math.Pi/3)*1e3)
	}
	// Output:
	// z = 0.5 m: 1.22 mm face-on, 1.78 mm at 60°
	// z = 1.0 m: 1.88 mm face-on, 2.28 mm at 60°
	// z = 2.0 m: 6.06 mm face-on, 6.35 mm at 60°
}
