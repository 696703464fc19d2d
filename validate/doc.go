// Package validate proves whether a part's model lets a PPF-based robot
// cell find the part: it renders synthetic scenes of the part, scores
// pose hypotheses against each observation, measures pose errors, and
// calibrates the acceptance threshold the cell should use.
//
// # Overview
//
//   - Pose errors (pose_error.go): ADD and ADD-S (Hinterstoisser et al.
//     2012, ACCV, DOI 10.1007/978-3-642-37331-2_42), MSSD and MSPD of the
//     BOP benchmark (Hodaň et al. 2020, DOI 10.1007/978-3-030-66096-3_39)
//     over a part's symmetry transforms, correctness at 10 % of the
//     diameter, recall and average recall.
//   - Colour (hsv.go): Smith's (1978) HSV and a colour distance that
//     weighs hue by saturation, for comparing albedo with shaded pixels.
//   - Symmetry (symmetry.go): rotational symmetries of a surface by
//     self-alignment, for the geometry and for geometry with colour.
//   - Stable poses (hull.go, stable.go): the convex hull (Quickhull), the
//     solid's centre of mass and the quasi-static resting poses with
//     their probabilities.
//   - Scenes (scene.go): the part resting on a textured table, clutter,
//     an occluder hiding a chosen share of it, sensor noise; seeded and
//     reproducible scene by scene.
//   - Scorers (score.go): the depth-inlier baseline and the
//     point-difference score (depth, normal and colour per model point,
//     occlusion told from free-space violation).
//   - Calibration (calibrate.go): threshold, ROC area, percentile gap and
//     histograms from right and wrong hypotheses; the point score's
//     weights picked on a grid.
//   - Coverage (coverage.go): how much of a surface a sweep saw and how
//     often, from renders of the surface at the sweep's camera poses;
//     unseen regions as connected patches.
//   - Comparison (compare.go): a scan aligned to a reference (principal
//     axes, point-to-plane ICP on exact closest points, scale check) and
//     measured by precision, recall and F-score at τ (Knapitsch et al.
//     2017), Chamfer distance, Hausdorff-95 and signed deviation.
//   - Reports (report.go, report_html.go, pictures.go): the verdict with
//     its reasons and key figures as JSON, and a self-contained HTML
//     folder with PNG pictures, written atomically.
//   - The check (check.go, verdict.go, realframes.go, confusers.go,
//     openings.go, canonical.go, report_check.go): Check runs the whole
//     proof of a model — synthetic views voted with its PPF tables
//     (package features) and scored by both scorers side by side, the
//     weights and the acceptance threshold calibrated on them, its
//     openings, the sweep's own frames, its coverage, the other parts it
//     could be confused with, the comparison with its drawing model —
//     and VerdictRules, every threshold of the verdict in one place,
//     judges it ready, review or rescan with reasons. CanonicalFrame
//     gives a part its catalog frame.
//
// validate imports mesh, mesh/render, mesh/parts and features only; it
// never reads a sweep (the caller passes real frames and camera poses).
//
// # Frames and units
//
// Metres and radians. Part (model) frame: the frame of the part's mesh
// and cloud. ModelToCam maps it into the camera frame of
// mesh.Intrinsics (x right, y down, z forward). A scene's world frame
// is the table's: z up, the table top at z = 0; StablePose.ModelToSupport
// maps the part frame onto such a support frame. Symmetry transforms
// map the part frame onto itself.
//
// # Invariants
//
//   - Pose errors are in metres (MSPD in pixels) and never negative;
//     ErrorModel.Symmetries always starts with, or contains, the
//     identity.
//   - StableResult.Poses sum to probability 1 and are sorted most
//     probable first.
//   - Scene i depends only on the generator's meshes, options and i.
//   - Scorers and the error model allocate nothing per hypothesis and
//     are safe for concurrent use on shared, read-only inputs; a
//     SceneGenerator is not (one per goroutine).
//
// # Degenerate input
//
// Decided here. An ErrorModel needs at least one finite point. A convex
// hull needs four points not on one plane (error wrapping
// mesh.ErrDegenerate otherwise); coplanar and duplicate points are
// absorbed within 1e−9 of the bounding-box diagonal. A mesh that is not
// watertight has no solid of its own: StablePoses then takes the centre
// of mass of its convex hull's solid and says so (MassFromHull).
// Symmetry detection on a surface of zero area is an error; a part with
// no symmetry gets an empty report. A hypothesis with no model point
// facing the camera inside the image scores 0 with Expected = 0.
// Calibration needs at least one right and one wrong score.
// Coverage, Compare and NewSurface refuse a mesh without a face of
// positive area (mesh.ErrDegenerate); faces of zero area are neither
// seen nor unseen and never the closest face; no frames give zero
// coverage. Scores need at least one point on each side. Check needs a
// model with faces and the tables of its cloud; a model outside the
// plausible size of VerdictRules is judged rescan without rendering; a
// view without a hypothesis counts as missed by every scorer; a
// calibration without right or wrong hypotheses is left out and argues
// for review. A closed surface has no openings; CanonicalFrame refuses a
// surface without area and, for one without principal directions, falls
// back to the input's axes. The grey
// (S = 0) colours have no hue: HSVFromRGB reports H = 0 and the colour
// distance ignores it.
//
// # Safety
//
// A part whose model passes these checks still needs a supervised,
// reduced-speed trial in the cell, under the cell's risk assessment and
// local safety rules (ISO 10218-1 and -2; ISO/TS 15066 for collaborative
// operation). A synthetic check proves the model, not the cell.
package validate
