// A dielectric rod of radius rod_radius in a uniform field: square box between two plates
// (top and bottom curves), insulated side walls. Lengths in mm.
DefineConstant[ rod_radius = 1, half_size = 20, lc_rod = 0.05, lc_far = 1.5 ];
SetFactory("OpenCASCADE");
Rectangle(1) = {-half_size, -half_size, 0, 2 * half_size, 2 * half_size};
Disk(2) = {0, 0, 0, rod_radius};
BooleanFragments{ Surface{1}; Delete; }{ Surface{2}; Delete; }
e = 1e-6;
rod() = Surface In BoundingBox{-rod_radius - e, -rod_radius - e, -e, rod_radius + e, rod_radius + e, e};
all() = Surface{:};
host() = all();
host() -= {rod()};
Physical Surface("rod") = {rod()};
Physical Surface("host") = {host()};
Physical Curve("top") = Curve In BoundingBox{-half_size - e, half_size - e, -e, half_size + e, half_size + e, e};
Physical Curve("bottom") = Curve In BoundingBox{-half_size - e, -half_size - e, -e, half_size + e, -half_size + e, e};
MeshSize{ PointsOf{ Surface{:}; } } = lc_far;
MeshSize{ PointsOf{ Surface{rod()}; } } = lc_rod;
