// thiomap's report pages in a real browser: Debian's chromium, headless, driven through
// its DevTools protocol by playwright-core (which downloads no browser of its own).
//
// Usage: node tests/browser/check_report.mjs PATH/TO/thiomap WORK_DIR [SHOTS_DIR]
//
// For the three shipped demo cubes (map --report), one merged archive (batch --report,
// merge --report), and a pair of demo epochs (compare --report, targets --report), each
// page must: load with no console error, page error or network
// request (every request the page makes is recorded; only the page's own file:// URL is
// allowed); decode every <img> (naturalWidth > 0); show in the pixel inspector, for three
// pixels picked with the mouse, the abundances and standard errors abundance.fits and
// stderr.fits hold at those pixels (read
// here with a FITS reader of our own, FITS Standard 4.0 §3–5: 2880-byte blocks, big-endian
// IEEE floats); let the keyboard reach the inspector (Tab) and move it (arrow keys); and
// show no horizontal overflow at 1280 × 800 and 390 × 844 (a phone). A results folder
// whose unit label is "<script>…" must show the text and run no script.
import { chromium } from "playwright-core";
import { execFileSync } from "node:child_process";
import fs from "node:fs";
import path from "node:path";
import { pathToFileURL } from "node:url";

const [thiomap, work, shots] = process.argv.slice(2);
if (!thiomap || !work) {
  console.error("usage: node check_report.mjs PATH/TO/thiomap WORK_DIR [SHOTS_DIR]");
  process.exit(2);
}
const root = path.resolve(path.dirname(new URL(import.meta.url).pathname), "..", "..");
const chromiumPath = process.env.CHROMIUM || "/usr/bin/chromium";
const ARGS = [
  "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
  "--disable-background-networking", "--disable-component-update", "--disable-sync",
];
let failures = 0;
function check(ok, what) {
  if (ok) console.log(`ok   ${what}`);
  else { console.log(`FAIL ${what}`); failures++; }
}
function run(args) {
  execFileSync(thiomap, args, { stdio: ["ignore", "ignore", "inherit"] });
}

// The primary image of a FITS file: { axes, data: Float32Array } (BITPIX -32 only).
function readFits(file) {
  const buf = fs.readFileSync(file);
  const cards = {};
  let off = 0;
  for (;;) {
    const card = buf.toString("latin1", off, off + 80);
    off += 80;
    const key = card.slice(0, 8).trim();
    if (key === "END") break;
    if (card[8] === "=") cards[key] = card.slice(10).split("/")[0].trim();
  }
  off = Math.ceil(off / 2880) * 2880;
  if (+cards.BITPIX !== -32) throw new Error(`${file}: BITPIX ${cards.BITPIX}`);
  const axes = [];
  for (let i = 1; i <= +cards.NAXIS; i++) axes.push(+cards[`NAXIS${i}`]);
  const n = axes.reduce((a, b) => a * b, 1);
  const data = new Float32Array(n);
  for (let i = 0; i < n; i++) data[i] = buf.readFloatBE(off + 4 * i);
  return { axes, data };
}

fs.rmSync(work, { recursive: true, force: true });
fs.mkdirSync(work, { recursive: true });
const cubes = [
  "brimveil-globe-mapper96",
  "brimveil-globe-imager7",
  "brimveil-tile-spectrometer24",
];
const pages = [];
for (const c of cubes) {
  const out = path.join(work, c);
  run(["map", path.join(root, "demo-cubes", `${c}.fits`), "--out", out, "--report"]);
  pages.push({ name: c, file: path.join(out, "report.html"), dir: out, inspector: true });
}
// An archive: two cubes through batch --report, then merge --report.
const arch = path.join(work, "archive");
fs.mkdirSync(arch);
for (const c of cubes.slice(1)) fs.copyFileSync(path.join(root, "demo-cubes", `${c}.fits`), path.join(arch, `${c}.fits`));
run(["batch", arch, "--out", path.join(work, "batch"), "--report", "--workers", "1"]);
run(["merge", path.join(work, "batch"), "--out", path.join(work, "merged"), "--report"]);
pages.push({ name: "merged archive", file: path.join(work, "merged", "archive.html"), inspector: false });
// Two epochs: compare --report and targets --since --report (no inspector on these pages).
const later = path.join(work, "later.fits");
run(["demo", "--epoch-of", path.join(root, "demo-cubes", `${cubes[0]}.fits`), "--changes", "ring,stranger,flow", "--out", later]);
run(["map", later, "--out", path.join(work, "later")]);
run(["compare", path.join(work, cubes[0]), path.join(work, "later"), "--out", path.join(work, "change"), "--report"]);
pages.push({ name: "change", file: path.join(work, "change", "report.html"), inspector: false });
run(["targets", path.join(work, "later"), "--since", path.join(work, cubes[0]), "--out", path.join(work, "targets"), "--report"]);
pages.push({ name: "targets", file: path.join(work, "targets", "report.html"), inspector: false });
// Hostile text: a unit label that is markup.
const hostile = path.join(work, "hostile");
fs.cpSync(path.join(work, cubes[0]), hostile, { recursive: true });
const csv = fs.readFileSync(path.join(hostile, "units.csv"), "utf8").split("\n");
csv[1] = csv[1].replace(/^(\d+),("[^"]*"|[^,]*)/, '$1,"<script>window.__pwned=1</script><img src=x onerror=window.__pwned=2>"');
fs.writeFileSync(path.join(hostile, "units.csv"), csv.join("\n"));
run(["report", hostile, "--cube", path.join(root, "demo-cubes", `${cubes[0]}.fits`)]);

const profile = fs.mkdtempSync(path.join(work, "profile-"));
const browser = await chromium.launchPersistentContext(profile, {
  executablePath: chromiumPath, headless: true, args: ARGS, viewport: { width: 1280, height: 800 },
});

async function open(file) {
  const page = await browser.newPage();
  const errors = [], requests = [];
  page.on("console", (m) => { if (m.type() === "error") errors.push(m.text()); });
  page.on("pageerror", (e) => errors.push(String(e)));
  page.on("request", (r) => requests.push(r.url()));
  const url = pathToFileURL(file).href;
  await page.goto(url, { waitUntil: "load" });
  const loadMs = await page.evaluate(() => {
    const n = performance.getEntriesByType("navigation")[0];
    return n ? n.loadEventEnd - n.startTime : NaN;
  });
  return { page, errors, requests: requests.filter((u) => u !== url && !u.startsWith("data:")), loadMs, url };
}

for (const p of pages) {
  const mb = fs.statSync(p.file).size / 1e6;
  const { page, errors, requests, loadMs } = await open(p.file);
  console.log(`# ${p.name}: ${mb.toFixed(1)} MB, load event after ${loadMs.toFixed(0)} ms`);
  check(errors.length === 0, `${p.name}: no console errors ${errors.length ? JSON.stringify(errors) : ""}`);
  check(requests.length === 0, `${p.name}: no network request ${requests.length ? JSON.stringify(requests) : ""}`);
  const imgs = await page.evaluate(() => Array.from(document.images).map((i) => [i.alt, i.complete && i.naturalWidth > 0]));
  check(imgs.length > 0 && imgs.every((i) => i[1]), `${p.name}: all ${imgs.length} images decoded`);
  check(imgs.every((i) => i[0] && i[0].length > 3), `${p.name}: every image has alt text`);
  const heads = await page.evaluate(() => Array.from(document.querySelectorAll("h1,h2,h3,h4")).map((h) => +h.tagName[1]));
  check(heads[0] === 1 && heads.every((h, i) => i === 0 || h <= heads[i - 1] + 1), `${p.name}: headings in order`);
  const madeBy = await page.evaluate(() => document.querySelector(".madeby")?.textContent || "");
  check(/^made by thiomap \d+\.\d+\.\d+ from .+ \(.*sha256 [0-9a-f]{16}\)$/.test(madeBy), `${p.name}: made-by line "${madeBy}"`);
  const cautions = await page.evaluate(() => document.querySelector(".cautions")?.innerText || "");
  check(/flight rules/.test(cautions) && /H2S/.test(cautions), `${p.name}: cautions visible`);
  if (p.inspector) {
    const meta = await page.evaluate(() => {
      const d = JSON.parse(document.getElementById("thiomap-data").textContent);
      return { step: d.step, gr: d.grid_rows, gc: d.grid_cols, bottom: d.row0_at_bottom, ids: d.ids, spectra: !!d.spectra };
    });
    check(meta.spectra, `${p.name}: the inspector has the cube's spectra`);
    const fits = readFits(path.join(p.dir, "abundance.fits"));
    const errs = readFits(path.join(p.dir, "stderr.fits"));
    const [nx, ny] = fits.axes;
    const canvas = await page.$("#unitmap");
    await canvas.scrollIntoViewIfNeeded();
    const box = await canvas.boundingBox();
    const picks = [[0.5, 0.5], [0.3, 0.62], [0.71, 0.4]];
    for (const [fy, fx] of picks) {
      const gy = Math.floor(fy * meta.gr), gx = Math.floor(fx * meta.gc);
      const y = meta.bottom ? meta.gr - 1 - gy : gy;
      await page.mouse.move(box.x + ((gx + 0.5) / meta.gc) * box.width, box.y + ((y + 0.5) / meta.gr) * box.height);
      const shown = await page.evaluate(() => {
        const el = document.getElementById("inspector");
        return {
          row: +el.dataset.row, col: +el.dataset.col,
          values: Array.from(el.querySelectorAll("td[data-id]")).map((td) => [td.dataset.id, +td.dataset.value]),
          errors: Array.from(el.querySelectorAll("td[data-se]")).map((td) => +td.dataset.value),
        };
      });
      const r = gy * meta.step, c = gx * meta.step;
      let worst = 0;
      shown.values.forEach(([id, v], j) => {
        const want = fits.data[(j * ny + r) * nx + c];
        const d = Number.isNaN(want) && Number.isNaN(v) ? 0 : Math.abs(v - want);
        worst = Math.max(worst, Number.isNaN(d) ? Infinity : d);
      });
      shown.errors.forEach((v, j) => {
        const want = errs.data[(j * ny + r) * nx + c];
        const d = Number.isNaN(want) && Number.isNaN(v) ? 0 : Math.abs(v - want);
        worst = Math.max(worst, Number.isNaN(d) ? Infinity : d);
      });
      check(shown.row === r && shown.col === c && shown.values.length === meta.ids.length && shown.errors.length === meta.ids.length && worst === 0,
        `${p.name}: inspector at row ${r}, column ${c} (shows row ${shown.row}, column ${shown.col}) gives abundance.fits's and stderr.fits's ${shown.values.length} values (worst difference ${worst})`);
    }
    // The unit table sorts by a column when its heading is clicked.
    await page.click("#units-table th:nth-child(4) button");
    const sorted = await page.evaluate(() => Array.from(document.querySelectorAll("#units-table tbody tr"))
      .map((r) => +r.cells[3].textContent));
    check(sorted.length > 1 && sorted.every((v, i) => i === 0 || sorted[i - 1] <= v), `${p.name}: the unit table sorts by pixels (${sorted.join(", ")})`);
    // The keyboard reaches the map and moves the inspector.
    await page.evaluate(() => document.activeElement && document.activeElement.blur());
    let reached = false;
    for (let i = 0; i < 80 && !reached; i++) {
      await page.keyboard.press("Tab");
      reached = await page.evaluate(() => document.activeElement && document.activeElement.id === "unitmap");
    }
    check(reached, `${p.name}: Tab reaches the inspector map`);
    const before = await page.evaluate(() => +document.getElementById("inspector").dataset.col);
    await page.keyboard.press("ArrowLeft");
    const after = await page.evaluate(() => +document.getElementById("inspector").dataset.col);
    check(after === before - meta.step || (before === 0 && after === 0), `${p.name}: ArrowLeft moves the inspector (${before} → ${after})`);
  }
  if (shots && p.inspector) {
    fs.mkdirSync(shots, { recursive: true });
    const slug = p.name.replace(/[^a-z0-9]+/gi, "-");
    await (await page.$("#overview")).screenshot({ path: path.join(shots, `report-${slug}-overview.png`) });
  }
  for (const [w, h] of [[1280, 800], [390, 844]]) {
    await page.setViewportSize({ width: w, height: h });
    await page.waitForTimeout(100);
    const over = await page.evaluate(() => document.documentElement.scrollWidth - document.documentElement.clientWidth);
    check(over <= 0, `${p.name}: no horizontal overflow at ${w} × ${h} (${over} px)`);
    if (shots) {
      fs.mkdirSync(shots, { recursive: true });
      const slug = p.name.replace(/[^a-z0-9]+/gi, "-");
      await page.screenshot({ path: path.join(shots, `report-${slug}-${w}x${h}.png`) });
    }
  }
  // Print on A4 (210 mm at 96 px per inch: 794 px, less the 14 mm margins): no picture,
  // chart or table wider than the printable width. And the dark scheme loads cleanly.
  await page.emulateMedia({ media: "print" });
  await page.setViewportSize({ width: 688, height: 1000 });
  const wide = await page.evaluate(() => Array.from(document.querySelectorAll("img, canvas, svg.chart, table"))
    .filter((e) => e.getBoundingClientRect().right > document.documentElement.clientWidth + 1)
    .map((e) => e.tagName + (e.alt ? ` (${e.alt.slice(0, 40)})` : "")));
  check(wide.length === 0, `${p.name}: prints on A4 without cut maps ${wide.length ? JSON.stringify(wide) : ""}`);
  await page.emulateMedia({ media: "screen", colorScheme: "dark" });
  const bg = await page.evaluate(() => getComputedStyle(document.body).backgroundColor);
  check(bg === "rgb(21, 23, 26)", `${p.name}: dark colour scheme applies (${bg})`);
  await page.close();
}

{
  const { page, errors } = await open(path.join(hostile, "report.html"));
  const pwned = await page.evaluate(() => window.__pwned);
  const text = await page.evaluate(() => document.getElementById("units-table").innerText);
  check(pwned === undefined && errors.length === 0, "hostile label: no script ran");
  check(text.includes("<script>window.__pwned=1</script>"), "hostile label: shown as text");
  await page.close();
}

await browser.close();
fs.rmSync(profile, { recursive: true, force: true });
console.log(failures ? `${failures} browser checks failed` : "all browser checks passed");
process.exit(failures ? 1 : 0);
