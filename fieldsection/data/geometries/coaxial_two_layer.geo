// Coaxial line with two concentric insulation layers (graded cable insulation).
// Inner conductor radius r_inner (hole), layer boundary r_layer, outer conductor r_outer. Lengths in mm.
DefineConstant[ r_inner = 1, r_layer = 2, r_outer = 4, lc = 0.2 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, r_outer};
Disk(2) = {0, 0, 0, r_layer};
Disk(3) = {0, 0, 0, r_inner};
BooleanDifference(4) = { Surface{1}; }{ Surface{2}; };
BooleanDifference(5) = { Surface{2}; Delete; }{ Surface{3}; Delete; };
Delete { Surface{1}; }
BooleanFragments{ Surface{4, 5}; Delete; }{}
e = 1e-6;
inner_layer() = Surface In BoundingBox{-r_layer - e, -r_layer - e, -e, r_layer + e, r_layer + e, e};
all() = Surface{:};
outer_layer() = all();
outer_layer() -= {inner_layer()};
Physical Surface("inner_layer") = {inner_layer()};
Physical Surface("outer_layer") = {outer_layer()};
Physical Curve("inner") = Curve In BoundingBox{-r_inner - e, -r_inner - e, -e, r_inner + e, r_inner + e, e};
rim() = Curve In BoundingBox{-r_outer - e, -r_outer - e, -e, r_outer + e, r_outer + e, e};
rim() -= Curve In BoundingBox{-r_layer - e, -r_layer - e, -e, r_layer + e, r_layer + e, e};
Physical Curve("outer") = {rim()};
MeshSize{ PointsOf{ Surface{:}; } } = lc;
