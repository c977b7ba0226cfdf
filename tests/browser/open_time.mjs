// Times how long a report page takes to open in Debian's chromium (headless): the load
// event, and the inspector's first drawing (the page's script has run). Usage:
//   node tests/browser/open_time.mjs PAGE.html [RUNS]   (benches/report/large.sh uses it)
import { chromium } from "playwright-core";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { pathToFileURL } from "node:url";

const [file, runs = "3"] = process.argv.slice(2);
const profile = fs.mkdtempSync(path.join(os.tmpdir(), "thiomap-bench-"));
const browser = await chromium.launchPersistentContext(profile, {
  executablePath: process.env.CHROMIUM || "/usr/bin/chromium",
  headless: true,
  args: ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync"],
  viewport: { width: 1280, height: 800 },
});
console.log(`# ${path.basename(file)}: ${(fs.statSync(file).size / 1e6).toFixed(1)} MB; ${os.cpus().length} cores`);
for (let i = 1; i <= +runs; i++) {
  const page = await browser.newPage();
  const t0 = Date.now();
  await page.goto(pathToFileURL(file).href, { waitUntil: "load" });
  await page.waitForFunction(() => document.getElementById("inspector")?.dataset.row !== undefined);
  const wall = Date.now() - t0;
  const load = await page.evaluate(() => performance.getEntriesByType("navigation")[0].loadEventEnd);
  console.log(`run ${i}: load event ${load.toFixed(0)} ms, inspector drawn ${wall} ms after the request`);
  await page.close();
}
await browser.close();
fs.rmSync(profile, { recursive: true, force: true });
