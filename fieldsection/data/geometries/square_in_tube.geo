// A square conductor (side `side`) centred in a round grounded tube (radius r_outer), one
// dielectric between: four 90-degree conductor corners, each with a 270-degree dielectric side.
// Lengths in mm.
DefineConstant[ side = 2, r_outer = 5, lc = 0.5 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, r_outer};
Rectangle(2) = {-side / 2, -side / 2, 0, side, side};
BooleanDifference(3) = { Surface{1}; Delete; }{ Surface{2}; Delete; };
e = 1e-6;
bar() = Curve In BoundingBox{-side / 2 - e, -side / 2 - e, -e, side / 2 + e, side / 2 + e, e};
tube() = Curve{:};
tube() -= {bar()};
Physical Surface("insulation") = {3};
Physical Curve("bar") = {bar()};
Physical Curve("tube") = {tube()};
MeshSize{ PointsOf{ Surface{:}; } } = lc;
