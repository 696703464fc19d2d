// Package features implements point-pair features (PPF) for scanfold:
// the model tables of Drost, Ulrich, Navab & Ilic (2010, CVPR, "Model
// globally, match locally", DOI 10.1109/CVPR.2010.5540108), their binary
// file, and voting for pose hypotheses against a scene cloud with the
// noise-robust voting of Hinterstoisser, Lepetit, Rajkumar & Konolige
// (2016, ECCV, "Going further with point pair features", DOI
// 10.1007/978-3-319-46487-9_51), pose clustering, and refinement by the
// point-to-plane ICP of package mesh.
//
// # Units and frames
//
// Lengths are metres and angles radians. A model cloud is in the model's
// own frame; a scene cloud in the camera's. Hypotheses carry
// ModelToScene poses (x_scene = R·x_model + T).
//
// # Quantisation
//
// A pair's feature F = (‖d‖, ∠(n1, d), ∠(n2, d), ∠(n1, n2)) is
// quantised with a distance step τ_d·diameter (default τ_d = 0.05) and
// an angle step 2π/n (default n = 30, 12°), so the three angles in
// [0, π] fall into n/2 bins each. Angles are binned from their cosines
// against precomputed edges cos(b·2π/n) (see cosBins): the edges are
// the same float64 values for model and scene. The four bins are packed
// into one key in mixed radix, distance slowest (a perfect hash; the
// default key space is 21·15³ = 70,875 keys).
//
// The angle φ of the paired point about the reference normal (α_m = −φ
// in Drost's notation) is quantised to L = n·⌊256/n⌋ fine levels (240
// levels of 1.5° by default), stored as a byte, and the vote's angle
// α = φ_s − φ_m is formed from fine levels and then binned into n bins;
// the fine level says which neighbouring α bin is nearer.
//
// # Planar pairs
//
// Pairs of points on one plane (quantised normals both perpendicular to
// d and parallel to each other) are left out of the tables by default
// (Params.SkipPlanar), and voting skips scene pairs with that key. On a
// part with flat faces these pairs make up the largest buckets, and a
// scene's support plane produces them at every reference point, so with
// them a single reference point costs millions of votes; without them
// the pose is found from pairs that span two surfaces, which carry the
// information anyway.
//
// # Voting and refinement
//
// Vote follows Drost et al. (2010): every fifth scene point is a
// reference; its pairs with the scene points within the model diameter
// (k-d tree radius search) look up their keys, and every model pair
// found votes for (model reference point, α) in a flat accumulator that
// each worker reuses. With Hinterstoisser et al. (2016) each pair also
// looks up the neighbouring bin of every feature dimension on the side
// of the nearer edge (up to 16 keys) and votes into the nearer
// neighbouring α bin, and a flag per (reference, key, α_s bin) keeps a
// combination from voting twice. The best cell of each of the three
// best model points becomes a pose; poses are clustered greedily (0.1 of
// the diameter, 24°) and a cluster's votes are summed. Symmetric parts
// give one cluster per equivalent pose, and they are all returned.
//
// Refinement is point-to-plane ICP built on mesh.PlaneSystem with the
// pair rules of mesh.ICPPointToPlane, in two stages (a coarse one from
// the voted pose, then one on close pairs measured along the sum of the
// model's and the scene's normals, the symmetric objective of
// Rusinkiewicz 2019, DOI 10.1145/3306346.3323037, since a depth image's
// normals are blurred across creases and thin faces),
// centred on the model and damped, because a single view often leaves a
// direction unconstrained (two visible planes let the part slide along
// their common line) and an undamped solve then refuses the step.
//
// # Degenerate input
//
// Decided once, here. A cloud without normals, with a non-finite
// coordinate or with a normal far from unit length is invalid
// (ErrInvalid). Coincident points form no pair. A model with fewer than
// two distinct points is degenerate (mesh.ErrDegenerate). A paired point
// on the line of the reference normal has φ = 0. A scene with no
// reference point, or in which no pair matches, yields no hypotheses and
// no error.
//
// # Determinism
//
// Tables and hypotheses are identical whatever the number of workers:
// work is split into contiguous index ranges whose results are merged in
// index order.
package features
