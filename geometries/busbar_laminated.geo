// Laminated DC-link busbar cross-section (a scenario of our own, for the demo).
// Two flat copper bars (holes, held at potentials by the case) separated by an insulating film,
// cast into an epoxy housing, in air, inside a grounded metal enclosure. A thin air pocket left
// beside the upper bar's edge on the film (a lamination defect) shows a partial-discharge site.
// Lengths in mm. Every DefineConstant below can be set from the case file.
DefineConstant[
  bar_width = 40, bar_thickness = 3, film_thickness = 0.3, film_overhang = 5,
  housing_wall = 3, enclosure_width = 120, enclosure_height = 80,
  pocket_length = 2, pocket_height = 0.1
];
SetFactory("OpenCASCADE");

bw = bar_width / 2;  t = film_thickness / 2;  fw = bw + film_overhang;
hw = fw + housing_wall;  hh = t + bar_thickness + housing_wall;

Rectangle(1) = {-enclosure_width / 2, -enclosure_height / 2, 0, enclosure_width, enclosure_height};
Rectangle(2) = {-hw, -hh, 0, 2 * hw, 2 * hh};
Rectangle(3) = {-fw, -t, 0, 2 * fw, 2 * t};
Rectangle(4) = {-bw, t, 0, 2 * bw, bar_thickness};
Rectangle(5) = {-bw, -t - bar_thickness, 0, 2 * bw, bar_thickness};
Rectangle(6) = {bw, t, 0, pocket_length, pocket_height};

// the bars are conductors: cut them out, leaving holes whose rims are the electrodes
BooleanDifference{ Surface{1, 2}; Delete; }{ Surface{4, 5}; Delete; }
BooleanFragments{ Surface{:}; Delete; }{}

e = 1e-4;
film() = Surface In BoundingBox{-fw - e, -t - e, -e, fw + e, t + e, e};
pocket() = Surface In BoundingBox{bw - e, t - e, -e, bw + pocket_length + e, t + pocket_height + e, e};
inside() = Surface In BoundingBox{-hw - e, -hh - e, -e, hw + e, hh + e, e};
housing() = inside();
housing() -= {film(), pocket()};
air() = Surface{:};
air() -= {inside()};

Physical Surface("film") = {film()};
Physical Surface("air_pocket") = {pocket()};
Physical Surface("housing") = {housing()};
Physical Surface("air") = {air()};
Physical Curve("bar_plus") = Curve In BoundingBox{-bw - e, t - e, -e, bw + e, t + bar_thickness + e, e};
Physical Curve("bar_minus") = Curve In BoundingBox{-bw - e, -t - bar_thickness - e, -e, bw + e, -t + e, e};
