// A round gas void (radius void_radius) in the middle of a solid slab of thickness `thickness`
// and width `width` between a bottom plate (curve "bottom", y = 0) and a top plate ("top"); the
// side faces ("sides") are left for the case (insulated: the applied field is uniform). Lengths in mm.
DefineConstant[ width = 40, thickness = 20, void_radius = 0.5, lc = 2, lc_void = 0.1 ];
SetFactory("OpenCASCADE");
Rectangle(1) = {-width / 2, 0, 0, width, thickness};
Disk(2) = {0, thickness / 2, 0, void_radius};
BooleanFragments{ Surface{1}; Delete; }{ Surface{2}; Delete; }
e = 1e-6;
void() = Surface In BoundingBox{-void_radius - e, thickness / 2 - void_radius - e, -e,
                                 void_radius + e, thickness / 2 + void_radius + e, e};
all() = Surface{:};
host() = all();
host() -= {void()};
Physical Surface("host") = {host()};
Physical Surface("void") = {void()};
Physical Curve("bottom") = Curve In BoundingBox{-width / 2 - e, -e, -e, width / 2 + e, e, e};
Physical Curve("top") = Curve In BoundingBox{-width / 2 - e, thickness - e, -e, width / 2 + e, thickness + e, e};
sides() = Curve In BoundingBox{-width / 2 - e, -e, -e, -width / 2 + e, thickness + e, e};
sides() += Curve In BoundingBox{width / 2 - e, -e, -e, width / 2 + e, thickness + e, e};
Physical Curve("sides") = {sides()};
MeshSize{ PointsOf{ Surface{:}; } } = lc;
MeshSize{ PointsOf{ Surface{void()}; } } = lc_void;
