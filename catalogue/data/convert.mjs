// convert.mjs turns the data files of two npm packages into catalogue.tsv,
// the compact form that package catalogue embeds (gzipped by regen.sh).
//
//   node convert.mjs D3C_DIR AE_DIR OUT_TSV MESSIER_REF_TSV
//
// D3C_DIR is the unpacked d3-celestial 0.7.35 package (BSD-3-Clause): stars,
// star names, deep-sky objects, Messier cross-index, constellation names.
// AE_DIR is the unpacked astronomy-engine 2.1.19 package (MIT): the table of
// constellation boundaries referred to B1875 (Roman 1987), copied from its
// source text. See README.md beside this file for the records and licences.
import fs from 'node:fs';
import path from 'node:path';

const [d3c, ae, out, messierRef] = process.argv.slice(2);
const data = (f) => JSON.parse(fs.readFileSync(path.join(d3c, 'data', f), 'utf8'));
const ra = (lon) => ((lon % 360) + 360) % 360; // GeoJSON longitude -> RA in degrees
const clean = (s) => String(s ?? '').replace(/[\u2009\u200e\t\n]/g, ' ').replace(/ +/g, ' ').trim();
const f4 = (x) => Number(x).toFixed(4);
const lines = [];

// Constellations: abbreviation and IAU name (d3-celestial constellations.json).
const cons = new Set();
for (const c of data('constellations.json').features) {
  if (cons.has(c.id)) continue; // Serpens is listed twice (Caput, Cauda)
  cons.add(c.id);
  lines.push(['C', c.id, c.id === 'Ser' ? 'Serpens' : clean(c.properties.name)].join('\t'));
}

// Boundaries: [index, ra_lo, ra_hi, dec_lo] in units of 1/240 deg of dec and
// 1/3600 h of RA, B1875, in search order (astronomy-engine's ConstelBounds).
const src = fs.readFileSync(path.join(ae, 'astronomy.js'), 'utf8');
const names = [...src.slice(src.indexOf('const ConstelNames = ['), src.indexOf('const ConstelBounds = ['))
  .matchAll(/\['(\w{3})', '[^']*'\]/g)].map((m) => m[1]);
const bsrc = src.slice(src.indexOf('const ConstelBounds = ['), src.indexOf('];', src.indexOf('const ConstelBounds = [')));
for (const m of bsrc.matchAll(/\[(\d+), (-?[\d.]+), (-?[\d.]+), (-?[\d.]+)\]/g)) {
  lines.push(['B', names[Number(m[1])], m[2], m[3], m[4]].join('\t'));
}

// Stars: every star of stars.8.json brighter than magnitude 6.5, plus every
// star that has a proper name (from stars.14.json when fainter than 8).
const starnames = data('starnames.json');
const MAGLIM = 6.5;
const seen = new Set();
for (const file of ['stars.8.json', 'stars.14.json']) {
  for (const s of data(file).features) {
    const hip = String(s.id);
    const n = starnames[hip] || {};
    const mag = Number(s.properties.mag);
    if (seen.has(hip) || !(mag <= MAGLIM || clean(n.name))) continue;
    seen.add(hip);
    const [lon, lat] = s.geometry.coordinates;
    lines.push(['S', hip, f4(ra(lon)), f4(lat), mag.toFixed(2), clean(n.name), clean(n.bayer), clean(n.flam), clean(n.c)].join('\t'));
  }
}

// Deep-sky objects: every NGC and IC entry of dsos.20.json, with the Messier
// number from messier.json and the common name from dsonames.json; Messier
// objects without an NGC/IC number keep their Messier position from messier.json.
const dsonames = data('dsonames.json');
const messier = data('messier.json').features;
const sedsOf = new Map(); // "NGC 5194" -> SEDS Messier record ("NGC 5194/5" counts as NGC 5194)
for (const m of messier) {
  const id = m.properties.desig.split('/')[0];
  if (/^(NGC|IC) /.test(id)) sedsOf.set(id, m);
}
// Sizes in arcmin, major x minor, rounded to 0.1 arcmin.
const dim = (x) => clean(x).split('x').filter((v) => v !== '').map((v) => String(Math.round(Number(v) * 10) / 10)).join('x');
const mag = (x) => (x === '' || x === undefined || Number(x) >= 99 ? '' : Number(x).toFixed(1));
const sepDeg = ([l1, b1], [l2, b2]) => {
  const r = Math.PI / 180;
  const c = Math.sin(b1 * r) * Math.sin(b2 * r) + Math.cos(b1 * r) * Math.cos(b2 * r) * Math.cos((l1 - l2) * r);
  return Math.acos(Math.min(1, c)) / r;
};
const corrected = [];
const messierDone = new Set();
for (const d of data('dsos.20.json').features) {
  if (!/^(NGC|IC) \d+[A-Z]?$/.test(d.id)) continue;
  let p = d.properties;
  let pos = d.geometry.coordinates;
  const seds = sedsOf.get(d.id);
  const m = /^M \d+$/.test(p.desig) ? p.desig.slice(2) : seds ? seds.id.replace(/^M/, '') : '';
  // The Messier objects are checked against SEDS: an entry whose position
  // is off by more than 10' and 0.6 of its size, or whose magnitude is off
  // by more than 2 mag, is a different object in the source (M 87, M 98 and
  // M 102 in d3-celestial 0.7.35); SEDS's position, magnitude and size
  // replace it, and README.md lists them.
  if (seds) {
    const major = Number(clean(p.dim).split('x')[0]) || 0;
    const off = sepDeg(pos, seds.geometry.coordinates) * 60;
    if ((off > 10 && off > 0.6 * major) || (p.mag !== '' && Math.abs(Number(p.mag) - seds.properties.mag) > 2)) {
      corrected.push(`M ${m} = ${d.id}: ${off.toFixed(1)}' and ${p.mag} mag from SEDS`);
      pos = seds.geometry.coordinates;
      p = { ...p, mag: seds.properties.mag, dim: seds.properties.dim };
    }
  }
  const [lon, lat] = pos;
  if (m) messierDone.add(m);
  const name = clean((dsonames[d.id] || (m && dsonames['M ' + m]) || {}).name);
  lines.push(['D', d.id, f4(ra(lon)), f4(lat), mag(p.mag), p.type, dim(p.dim), m, name].join('\t'));
}
console.log('replaced by SEDS values: ' + corrected.join('; '));
const ref = ['# Messier objects as listed by SEDS (H. Frommert), from d3-celestial 0.7.35 data/messier.json',
  '# messier\tcross_id\tra_deg\tdec_deg (J2000)'];
for (const m of messier) {
  const p = m.properties;
  const [lon, lat] = m.geometry.coordinates;
  ref.push([m.id.replace(/^M/, ''), p.desig, f4(ra(lon)), f4(lat)].join('\t'));
  const n = m.id.replace(/^M/, '');
  if (!messierDone.has(n)) {
    lines.push(['D', 'M ' + n, f4(ra(lon)), f4(lat), mag(p.mag), p.type, dim(p.dim), n, clean(p.alt || (dsonames['M ' + n] || {}).name)].join('\t'));
  }
}
fs.writeFileSync(out, lines.join('\n') + '\n');
fs.writeFileSync(messierRef, ref.join('\n') + '\n');
console.log(`wrote ${lines.length} records to ${out}`);
