// Coaxial line cross-section: inner conductor (hole) of radius r_inner, outer conductor of
// radius r_outer, one dielectric between them. Lengths in mm.
DefineConstant[ r_inner = 1, r_outer = 3, lc = 0.2 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, r_outer};
Disk(2) = {0, 0, 0, r_inner};
BooleanDifference(3) = { Surface{1}; Delete; }{ Surface{2}; Delete; };
Physical Surface("insulation") = {3};
Physical Curve("inner") = {2};
Physical Curve("outer") = {1};
MeshSize{ PointsOf{ Surface{3}; } } = lc;
