// Benchmark of the review page in headless Chromium (device pixel ratio 2) on a
// 6622 x 4677 sheet (ISO A1 at 200 dpi) with 1,000 and 5,000 boxes:
//
// - opening the sheet: cold (server just started, nothing made yet), warm (the
//   server has made the tiles, as it does on its own after starting) and after a
//   restart (tiles read from the pack on disk);
// - frame interval while panning and zooming, with the whole sheet in view
//   (every box drawn) and at one screen pixel per sheet pixel;
// - key press to drawn frame (moving a box; deciding proposals);
// - a review of 200 proposals by keyboard alone, counting mouse events.
//
// Not a test: it prints figures and writes reports/bench/review.md. From the
// repository root:
//
//   cargo build -p symtrust-review --release --example serve_fixture
//   node tests/browser/bench-review.mjs
//
// A peer run of an older build side by side: SERVE_FIXTURE=path/to/its/serve_fixture
// PEER=1 node tests/browser/bench-review.mjs prints the same figures as JSON and
// writes no report ("warm" is then a second opening on the same server, and the
// steps an older server cannot do, waiting for its tile pack and a restart on
// the same site, are left out).
import { chromium } from "playwright-core";
import { spawn } from "node:child_process";
import fs from "node:fs";
import path from "node:path";
import os from "node:os";
import readline from "node:readline";

const root = path.resolve(path.dirname(new URL(import.meta.url).pathname), "../..");
const exe = process.env.SERVE_FIXTURE || path.join(root, "target/release/examples/serve_fixture");
const chromiumPath = process.env.CHROMIUM || "/usr/bin/chromium";
const VIEWPORT = { width: 1600, height: 1000 };
const PEER = process.env.PEER === "1";

function pct(xs, p) {
  const s = [...xs].sort((a, b) => a - b);
  return s.length ? s[Math.min(s.length - 1, Math.ceil((p / 100) * s.length) - 1)] : NaN;
}
const sleep = (ms) => new Promise((r) => setTimeout(r, ms));
async function fixture(args) {
  const child = spawn(exe, args, { stdio: ["pipe", "pipe", "inherit"] });
  const line = await new Promise((resolve, reject) => {
    readline.createInterface({ input: child.stdout }).once("line", resolve);
    child.once("exit", (c) => reject(new Error("serve_fixture exited " + c)));
  });
  return { child, ...JSON.parse(line) };
}
function stop(fx) {
  return new Promise((resolve) => { fx.child.once("exit", resolve); fx.child.stdin.end(); });
}
async function packed(site) {
  if (PEER) { await sleep(3000); return; }
  const dir = path.join(site, "cache/review-tiles");
  for (let i = 0; i < 1200; i++) {
    if (fs.existsSync(dir) && fs.readdirSync(dir).some((f) => f.endsWith(".tiles"))) return;
    await sleep(50);
  }
  throw new Error("no tile pack made in 60 s");
}

// Opens the sheet in a fresh page; returns the page and the opening figures.
async function open(browser, fx) {
  const context = await browser.newContext({ viewport: VIEWPORT, deviceScaleFactor: 2 });
  const page = await context.newPage();
  const t0 = Date.now();
  await page.goto(fx.url + "#/sheet/" + fx.sheet);
  await page.waitForSelector("body[data-ready='1']", { state: "attached", timeout: 60000 });
  const wall = Date.now() - t0;
  const marks = await page.evaluate(() => ["symtrust-first-view", "symtrust-usable"].map((n) => performance.getEntriesByName(n)[0].startTime));
  return { context, page, first: marks[0], sharp: marks[1], wall };
}

async function gapsDuring(page, act) {
  await page.evaluate(() => {
    window.__review.frames.length = 0; window.__gaps = []; window.__gapsOn = true;
    let last = performance.now();
    const tick = (t) => { window.__gaps.push(t - last); last = t; if (window.__gapsOn) requestAnimationFrame(tick); };
    requestAnimationFrame(tick);
  });
  await act();
  return page.evaluate(() => { window.__gapsOn = false; return { frames: [...window.__review.frames], gaps: window.__gaps.slice(1), scale: window.__review.scale }; });
}
async function panAndZoom(page, cx, cy) {
  for (let round = 0; round < 3; round++) {
    await page.mouse.move(cx, cy); await page.mouse.down();
    for (let i = 0; i < 60; i++) await page.mouse.move(cx - i * 12, cy - i * 6);
    await page.mouse.up();
    for (let i = 0; i < 20; i++) { await page.mouse.move(cx + (i % 5) * 30, cy); await page.mouse.wheel(0, i < 10 ? 120 : -120); }
  }
}
async function keyLatency(page, keys, n) {
  await page.evaluate(() => { window.__review.latencies.length = 0; });
  for (let i = 0; i < n; i++) { await page.keyboard.press(keys[i % keys.length]); await page.waitForTimeout(30); }
  await page.waitForTimeout(200);
  return page.evaluate(() => [...window.__review.latencies]);
}

async function run(browser, boxes) {
  const out = fs.mkdtempSync(path.join(os.tmpdir(), "symtrust-bench-"));
  const site = path.join(out, "site");
  // Cold: the page is opened the moment the server prints its address.
  let fx = await fixture(["--paper", "a1", "--boxes", String(boxes), "--out", site]);
  const cold = await open(browser, fx);
  await cold.context.close();
  // Warm: once the server has made the tiles by itself.
  await packed(site);
  await sleep(500);
  const warm = await open(browser, fx);
  const page = warm.page;
  const canvas = await page.locator("#canvas").boundingBox();
  const cx = canvas.x + canvas.width / 2, cy = canvas.y + canvas.height / 2;
  await page.mouse.move(cx, cy);
  await page.waitForTimeout(500);
  const whole = await gapsDuring(page, () => panAndZoom(page, cx, cy));
  // About one CSS pixel per sheet pixel, around the middle of the sheet.
  await page.evaluate(() => { const S = window.__review; S.scale = 1; const c = document.getElementById("canvas"); S.ox = S.local.sheet.width / 2 - c.clientWidth / 2; S.oy = S.local.sheet.height / 2 - c.clientHeight / 2; requestDraw(); });
  await page.waitForTimeout(1500);
  const near = await gapsDuring(page, () => panAndZoom(page, cx, cy));
  // Halfway: 0.45 CSS px per sheet pixel, about a fifth of the sheet in view, every
  // tile in view scaled down.
  await page.evaluate(() => { const S = window.__review; S.scale = 0.45; const c = document.getElementById("canvas"); S.ox = S.local.sheet.width / 2 - c.clientWidth / 2 / 0.45; S.oy = S.local.sheet.height / 2 - c.clientHeight / 2 / 0.45; requestDraw(); });
  await page.waitForTimeout(1500);
  const half = await gapsDuring(page, () => panAndZoom(page, cx, cy));
  await page.keyboard.press("Tab");
  await page.waitForTimeout(500);
  const move = await keyLatency(page, ["ArrowRight"], 30);
  const decide = await keyLatency(page, ["a", "r", "Tab"], 30);
  await warm.context.close();
  await stop(fx);
  // Restart: a new server on the same site reads the tile pack from disk.
  let restart = { first: NaN, sharp: NaN, wall: NaN };
  if (!PEER) {
    fx = await fixture(["--out", site]);
    restart = await open(browser, fx);
    await restart.context.close();
    await stop(fx);
  }
  fs.rmSync(out, { recursive: true, force: true });
  const gap = (g) => ({ drawP95: pct(g.frames, 95), drawMax: Math.max(...g.frames), gapP50: pct(g.gaps, 50), gapP95: pct(g.gaps, 95), n: g.gaps.length, scale: g.scale });
  return {
    boxes: fx.boxes, width: fx.width, height: fx.height,
    cold: { first: cold.first, sharp: cold.sharp, wall: cold.wall },
    warm: { first: warm.first, sharp: warm.sharp, wall: warm.wall },
    restart: { first: restart.first, sharp: restart.sharp, wall: restart.wall },
    whole: gap(whole), half: gap(half), near: gap(near),
    move: { p50: pct(move, 50), p95: pct(move, 95), n: move.length },
    decide: { p50: pct(decide, 50), p95: pct(decide, 95), n: decide.length },
  };
}

// 200 proposals decided with the keyboard alone, from the sheet list on: most
// accepted, every seventh rejected, every tenth corrected (moved 1 px, class 2)
// and accepted. Mouse, pointer, wheel and touch events are counted.
async function keyboardReview(browser) {
  const out = fs.mkdtempSync(path.join(os.tmpdir(), "symtrust-bench-"));
  const site = path.join(out, "site");
  const fx = await fixture(["--paper", "a1", "--boxes", "1000", "--out", site]);
  await packed(site);
  const context = await browser.newContext({ viewport: VIEWPORT, deviceScaleFactor: 2 });
  await context.addInitScript(() => {
    window.__mouse = 0;
    for (const t of ["mousedown", "mouseup", "mousemove", "click", "dblclick", "wheel", "pointerdown", "pointermove", "pointerup", "touchstart", "contextmenu"]) {
      window.addEventListener(t, () => { window.__mouse += 1; }, { capture: true });
    }
  });
  const page = await context.newPage();
  await page.goto(fx.url);
  await page.waitForSelector("#sheets tr[data-id]");
  const t0 = Date.now();
  await page.keyboard.press("Enter");
  await page.waitForSelector("body[data-ready='1']", { state: "attached", timeout: 60000 });
  await page.keyboard.press("Tab");
  let accepted = 0, rejected = 0, corrected = 0;
  for (let i = 0; i < 200; i++) {
    if (i % 10 === 9) { await page.keyboard.press("ArrowRight"); await page.keyboard.press("2"); await page.keyboard.press("a"); corrected += 1; }
    else if (i % 7 === 6) { await page.keyboard.press("r"); rejected += 1; }
    else { await page.keyboard.press("a"); accepted += 1; }
  }
  await page.waitForFunction(() => { const S = window.__review; return !S.pending.length && !S.inflight && document.getElementById("save-status").dataset.state === "saved"; }, null, { timeout: 60000 });
  const seconds = (Date.now() - t0) / 1000;
  const mouse = await page.evaluate(() => window.__mouse);
  await page.screenshot({ path: path.join(root, "target", "bench-review-keyboard.png") });
  await context.close();
  await stop(fx);
  const doc = JSON.parse(fs.readFileSync(path.join(site, "labels", fx.sheet + ".json"), "utf8"));
  const decided = doc.symbols.filter((s) => s.origin.kind === "proposed" && s.state !== "draft");
  const fixed = decided.filter((s) => s.state === "accepted" && (s.class !== s.origin.proposed_class || s.box.x !== s.origin.proposed_box.x));
  fs.rmSync(out, { recursive: true, force: true });
  return { decided: decided.length, accepted: decided.filter((s) => s.state === "accepted").length, rejected: decided.filter((s) => s.state === "rejected").length, corrected: fixed.length, planned: { accepted, rejected, corrected }, mouse, seconds };
}

const browser = await chromium.launch({
  executablePath: chromiumPath,
  args: ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update", "--disable-sync", "--no-first-run"],
});
const loadBefore = os.loadavg();
const results = [];
for (const n of [1000, 5000]) {
  const r = await run(browser, n);
  console.log(JSON.stringify(r));
  results.push(r);
}
const kb = await keyboardReview(browser);
console.log(JSON.stringify(kb));
const loadAfter = os.loadavg();
const version = browser.version();
await browser.close();
if (PEER) process.exit(0);

const f = (x) => x.toFixed(1);
const la = (l) => l.map((x) => x.toFixed(2)).join(", ");
const open3 = results.map((r) =>
  `| ${r.boxes} | ${f(r.cold.first)} | ${f(r.cold.sharp)} | ${f(r.warm.first)} | ${f(r.warm.sharp)} | ${f(r.restart.first)} | ${f(r.restart.sharp)} |`).join("\n");
const frames = results.flatMap((r) => [["whole sheet in view", r.whole], ["halfway", r.half], ["one CSS px per sheet px", r.near]].map(([what, g]) =>
  `| ${r.boxes} | ${what} (scale ${g.scale.toFixed(2)}) | ${f(g.drawP95)} | ${f(g.drawMax)} | ${g.n} | ${f(g.gapP50)} | ${f(g.gapP95)} |`)).join("\n");
const keys = results.map((r) => `| ${r.boxes} | ${f(r.move.p50)} | ${f(r.move.p95)} | ${f(r.decide.p50)} | ${f(r.decide.p95)} |`).join("\n");
const md = `# Review page benchmark

Measured by \`tests/browser/bench-review.mjs\` on ${new Date().toISOString().slice(0, 10)}:
headless Chromium ${version} (Debian, \`--disable-gpu\`, software rasterising and
compositing), viewport ${VIEWPORT.width} x ${VIEWPORT.height} CSS px at device pixel ratio 2,
${os.cpus().length} CPU cores (${os.cpus()[0].model}) shared with other work; load average
(1, 5, 15 min) ${la(loadBefore)} before and ${la(loadAfter)} after. The sheet is ISO A1 at
200 dpi (${results[0].width} x ${results[0].height} px) drawn by the synthetic plant generator;
boxes are the generator's symbols plus proposals on a grid to reach the count.

Command: \`cargo build -p symtrust-review --release --example serve_fixture && node tests/browser/bench-review.mjs\`

## Opening a sheet (ms from navigation start)

| boxes | cold: first view | cold: all tiles sharp | warm: first view | warm: all tiles sharp | restart: first view | restart: all tiles sharp |
|---|---|---|---|---|---|---|
${open3}

- *cold*: the page is opened the moment the server prints its address; nothing is
  made yet, so the server decodes the sheet and builds its pyramid while the page
  waits (the thread that makes every sheet's tiles at start and the page's request
  share that work).
- *warm*: the same server once it has made the sheet's tiles by itself (it does for
  the 20 most recently labelled sheets after starting), a fresh page.
- *restart*: a new server on the same site: the tiles come from the pack on disk
  (\`cache/review-tiles/<sha256>.tiles\`), nothing is decoded.
- *first view*: the \`symtrust-first-view\` mark: the whole sheet drawn from the
  coarsest level with every box, keys live. *all tiles sharp*: \`symtrust-usable\`,
  every tile in view at the resolution the zoom needs.

## Frames while panning and zooming (warm server)

Three rounds of a mouse drag (60 steps) and 20 wheel steps (10 out, 10 in), from
three starting views: the whole sheet (every box drawn),
halfway (0.45 CSS px per sheet px) and one CSS pixel per sheet pixel. The scale
shown is where the view ends.

| boxes | view | draw p95 ms | draw max ms | frames | rAF gap p50 ms | rAF gap p95 ms |
|---|---|---|---|---|---|---|
${frames}

- *draw*: the page's draw function (the script's share of a frame).
- *rAF gap*: interval between animation frames during the interaction: the frame
  time including rasterising and compositing (both in software here, on the same
  two shared cores). At 60 Hz it comes in steps of 16.7 ms.

## Key press to drawn frame (warm server, zoomed to the selected proposal)

| boxes | move a box (arrow) p50 ms | p95 ms | decide (A, R, Tab) p50 ms | p95 ms |
|---|---|---|---|---|
${keys}

From the key event's time stamp to the end of the frame that shows the change.

## 200 proposals by keyboard alone (1,000-box sheet)

From the sheet list: Enter opens the sheet, Tab selects the first proposal, then
${kb.planned.accepted} times A, ${kb.planned.rejected} times R and ${kb.planned.corrected} times arrow, 2, A (corrected and accepted).
On disk afterwards: ${kb.decided} proposals decided (${kb.accepted} accepted, of them ${kb.corrected} corrected; ${kb.rejected} rejected).
Mouse, pointer, wheel and touch events seen by the page: **${kb.mouse}**. Time from
the Enter key to every decision saved: ${kb.seconds.toFixed(1)} s (keys sent as fast
as the driver sends them; a person's pace sets the real figure).

Goals from the issue: frame p95 at most 16.7 ms with 1,000 boxes and 33 ms with
5,000; key press to visible change at most 50 ms; usable within 1 s; 200
proposals by keyboard with no mouse.
`;
fs.mkdirSync(path.join(root, "reports/bench"), { recursive: true });
fs.writeFileSync(path.join(root, "reports/bench/review.md"), md);
console.log("wrote reports/bench/review.md");
