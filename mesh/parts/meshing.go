package parts

import (
	"fmt"
	"math"

	"github.com/scanfold/scanfold/mesh"
)

// Mesh samples the part's SDF on a lattice with the given spacing
// (metres) over its extent grown by 1.5 spacings, so that every lattice
// point on the grid's border is outside and the surface comes out
// closed, and extracts the zero level set by marching cubes
// (mesh.SampleGrid, mesh.MarchingCubes). Vertex colours are the part's
// Color evaluated at the vertices themselves, which lie on the surface to
// within the interpolation error, rather than interpolated from lattice
// points up to a spacing away from it, so that printed edges stay sharp.
//
// It returns an error for a spacing that is not positive and finite or
// so small that the lattice would exceed mesh.MaxGridPoints points.
func (p *Part) Mesh(spacing float64) (*mesh.Mesh, error) {
	if !(spacing > 0) || math.IsInf(spacing, 0) {
		return nil, fmt.Errorf("parts: %s: mesh spacing %v must be positive and finite", p.Name, spacing)
	}
	b := p.Bounds(1.5 * spacing)
	g, err := mesh.SampleGrid(p.SDF, nil, b.Min, b.Max, spacing)
	if err != nil {
		return nil, fmt.Errorf("parts: %s: %w", p.Name, err)
	}
	m, err := mesh.MarchingCubes(g, 0)
	if err != nil {
		return nil, fmt.Errorf("parts: %s: %w", p.Name, err)
	}
	m.Colors = make([]mesh.RGB, len(m.Vertices))
	for i, v := range m.Vertices {
		m.Colors[i] = p.Color(v)
	}
	return m, nil
}
