// Geometric heliocentric and geocentric distances of Mercury..Neptune from the full VSOP87B
// series of the npm package astronomia 4.2.0 (planetposition.Planet.position2000), for
// gen_planets.py. Reads a JSON array of {"body": "mercury", "jde": 2460000.5} on stdin (jde is
// TT, used as TDB) and writes a JSON array of {"r_au": ..., "geo_delta_au": ...}.
//
//   NODE_PATH=/path/to/node_modules node astronomia_distances.cjs < in.json
const { planetposition } = require("astronomia");

const load = (name) => {
  const m = require("astronomia/data/vsop87B" + name);
  return m.default || m;
};
const series = {};
for (const b of ["mercury", "venus", "mars", "jupiter", "saturn", "uranus", "neptune"]) {
  series[b] = load(b);
}
const earth = new planetposition.Planet(load("earth"));

function rect(c) {
  return [c.range * Math.cos(c.lat) * Math.cos(c.lon), c.range * Math.cos(c.lat) * Math.sin(c.lon),
    c.range * Math.sin(c.lat)];
}

let input = "";
process.stdin.on("data", (d) => { input += d; });
process.stdin.on("end", () => {
  const out = JSON.parse(input).map(({ body, jde }) => {
    const p = new planetposition.Planet(series[body]).position2000(jde);
    const e = rect(earth.position2000(jde));
    const x = rect(p);
    const d = Math.hypot(x[0] - e[0], x[1] - e[1], x[2] - e[2]);
    return { r_au: p.range, geo_delta_au: d };
  });
  process.stdout.write(JSON.stringify(out));
});
