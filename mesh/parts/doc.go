// Package parts is scanfold's demo parts bin: five procedural parts from
// a small machine shop, each a signed-distance function (SDF) with a
// colour function, at its real size, known by a short name.
//
// # Frame and units
//
// Every part lives in its own part frame: metres, +z up, the part
// resting on the plane z = 0 in its natural stable pose, and the origin
// at the centre of its footprint (the centre of the box around the
// region where it touches the support). Part.Min and Part.Max give its
// exact axis-aligned extent in that frame.
//
// # The parts
//
// Sizes in millimetres (x × y × z). Symmetry means the rigid symmetry of
// the geometry; Part.Symmetry lists it and Symmetry.Rotations turns it
// into poses.
//
//   - bracket: an angle bracket 60 × 40 × 40, 4 thick. The base flange
//     lies on the support, the upright flange stands along its −y edge;
//     a 3 mm fillet fills the inner corner; one Ø8.5 hole through each
//     flange, 24 from the outer corner. Grey powder coat with a red paint
//     dab on the outside of the upright, at x > 0. Geometry: mirror
//     planes x = 0 and the bisector of the L, and so a half turn about
//     the bisector axis through the outer corner; the dab breaks all of
//     them.
//   - bushing: a flanged bushing 40 × 40 × 30: flange Ø40 × 5 on the
//     support, sleeve Ø28, bore Ø20, small 45° chamfers. Bronze, the bore
//     brighter. Geometry and colour: a solid of revolution about z (Fold
//     0), no flip (the flange is at one end).
//   - nut: an M16 hex nut 27.7 × 24 × 13 (24 across flats, 27.7 across
//     corners = 24·2/√3), corners on ±x, 30° chamfers on both faces,
//     Ø14 bore with 0.8 mm countersinks. Zinc-plated steel, the bore
//     darker. Geometry and colour: six-fold about z, six vertical mirror
//     planes and the mid-height plane, so the nut turned over is the
//     same (the half turn about x through its centre).
//   - valve: a valve body 70 × 54 × 52: a rounded block 50 × 40 × 40 with
//     a flanged Ø26 inlet along +x, a Ø18 outlet along −y and a Ø24
//     bonnet boss on top, each with a blind bore. Blue paint, machined
//     faces and bores bare steel, a yellow label with printed lines on
//     the +y face. Geometry: no symmetry.
//   - labelbox: a cardboard box 80 × 50 × 30 with 4 mm rounded edges.
//     Geometry: the box's symmetry (mirror planes x = 0, y = 0 and
//     mid-height; half turns about the three axes through its centre).
//     The print breaks it: a paper label with text lines and a red arrow
//     pointing +x on the top, a barcode on the +y side.
//
// # Distances
//
// Part.SDF is negative inside and 1-Lipschitz (|∇SDF| ≤ 1), so its
// magnitude never exceeds the true distance to the surface: what sphere
// tracing and grid sampling rely on. The primitives are exact
// Euclidean distances; unions are exact outside and intersections
// inside, conservative elsewhere.
//
// # Volume and area
//
// Part.Volume and Part.Area are closed-form values from handbook
// formulas (prism, cylinder, frustum, circular segment, Steiner's
// formula for rounded boxes, Pappus's theorems), stated beside each
// part's builder. Tests check them against seeded Monte Carlo estimates
// of the SDF's inside and against extracted meshes.
//
// # Meshes
//
// Part.Mesh samples the SDF on a lattice and extracts a closed,
// outward-oriented triangle mesh by marching cubes, with each vertex
// coloured by Color at the vertex. At 1 mm spacing the meshes have
// 5 000 to 42 000 triangles, and their volumes fall short of the closed
// forms by 0.08 % to 1.1 % (the lattice cuts across creases).
//
// # Colours
//
// Colours are 8-bit sRGB from pure functions of position: fine
// deterministic value noise (hashed lattice, no global generator) over
// base colours, with paint, labels and print as regions on faces. The
// colour is meant for surface points; off the surface it is still
// defined and deterministic.
//
// # Degenerate input
//
// Get with an unknown name returns an error listing the known names.
// Part.Mesh rejects a spacing that is not positive and finite, or one
// so fine that the lattice would exceed mesh.MaxGridPoints. SDF and Color
// accept any finite point; a point with a NaN coordinate gives NaN
// distance and an unspecified colour.
package parts
