package mesh

import "gonum.org/v1/gonum/spatial/r3"

// SmoothTaubin smooths m in place by Taubin's λ|μ method (Taubin 1995,
// "A signal processing approach to fair surface design", SIGGRAPH, DOI
// 10.1145/218380.218473): each iteration moves every vertex toward the
// mean of its neighbours by λ, then away by μ (μ < −λ < 0), which damps
// the high spatial frequencies of noise while, unlike plain Laplacian
// smoothing, not shrinking the surface. Boundary vertices (on an edge
// used by one face) stay put so that open rims keep their place. Normals
// are recomputed from the faces (VertexNormals) when m has normals.
// Typical values: λ = 0.5, μ = −0.53, 10 iterations.
func (m *Mesh) SmoothTaubin(lambda, mu float64, iterations int) {
	n := len(m.Vertices)
	nbrs := make([][]uint32, n)
	add := func(a, b uint32) {
		for _, x := range nbrs[a] {
			if x == b {
				return
			}
		}
		nbrs[a] = append(nbrs[a], b)
	}
	for _, f := range m.Faces {
		for k := 0; k < 3; k++ {
			a, b := f[k], f[(k+1)%3]
			add(a, b)
			add(b, a)
		}
	}
	fixed := make([]bool, n)
	for _, e := range m.BoundaryEdges() {
		fixed[e[0]], fixed[e[1]] = true, true
	}
	next := make([]r3.Vec, n)
	step := func(f float64) {
		for i, v := range m.Vertices {
			next[i] = v
			if fixed[i] || len(nbrs[i]) == 0 {
				continue
			}
			var c r3.Vec
			for _, j := range nbrs[i] {
				c = r3.Add(c, m.Vertices[j])
			}
			c = r3.Scale(1/float64(len(nbrs[i])), c)
			next[i] = r3.Add(v, r3.Scale(f, r3.Sub(c, v)))
		}
		m.Vertices, next = next, m.Vertices
	}
	for it := 0; it < iterations; it++ {
		step(lambda)
		step(mu)
	}
	if m.Normals != nil {
		m.Normals = m.VertexNormals()
	}
}
