// Coaxial line cross-section: inner conductor of radius r_inner, outer conductor of radius
// r_outer, one dielectric between them. Lengths in mm.
// meshed_core = 0: the inner conductor is a hole whose rim is the curve "inner";
// meshed_core = 1: it is a meshed surface "core" (to be held at a potential as an electrode).
DefineConstant[ r_inner = 1, r_outer = 3, lc = 0.2, meshed_core = 0 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, r_outer};
Disk(2) = {0, 0, 0, r_inner};
If (meshed_core)
  BooleanFragments{ Surface{1}; Delete; }{ Surface{2}; Delete; }
  e = 1e-6;
  core() = Surface In BoundingBox{-r_inner - e, -r_inner - e, -e, r_inner + e, r_inner + e, e};
  all() = Surface{:};
  insulation() = all();
  insulation() -= {core()};
  Physical Surface("core") = {core()};
  Physical Surface("insulation") = {insulation()};
  rim() = Curve In BoundingBox{-r_inner - e, -r_inner - e, -e, r_inner + e, r_inner + e, e};
  outer_only() = Curve In BoundingBox{-r_outer - e, -r_outer - e, -e, r_outer + e, r_outer + e, e};
  outer_only() -= {rim()};
  Physical Curve("outer") = {outer_only()};
Else
  BooleanDifference(3) = { Surface{1}; Delete; }{ Surface{2}; Delete; };
  Physical Surface("insulation") = {3};
  Physical Curve("inner") = {2};
  Physical Curve("outer") = {1};
EndIf
MeshSize{ PointsOf{ Surface{:}; } } = lc;
