// Eccentric coaxial line: inner conductor of radius r_inner whose centre is offset from the outer
// conductor's (radius r_outer) centre by offset. Both conductors are hole rims. Lengths in mm.
DefineConstant[ r_inner = 1, r_outer = 4, offset = 1, lc = 0.15, lc_inner = 0.05 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, r_outer};
Disk(2) = {offset, 0, 0, r_inner};
BooleanDifference(3) = { Surface{1}; Delete; }{ Surface{2}; Delete; };
Physical Surface("insulation") = {3};
Physical Curve("inner") = {2};
Physical Curve("outer") = {1};
MeshSize{ PointsOf{ Surface{3}; } } = lc;
MeshSize{ PointsOf{ Curve{2}; } } = lc_inner;
