// Drives the symtrust review page in headless Chromium and checks the label
// documents on disk after each step. Started by review/tests/browser.rs with
// REVIEW_URL (address with token), REVIEW_SITE (site folder), REVIEW_SHEET (sheet
// id) and SCREENSHOT_DIR. Exits non-zero on the first failed check.
import { chromium } from "playwright-core";
import assert from "node:assert/strict";
import fs from "node:fs";
import path from "node:path";
import { isDeepStrictEqual } from "node:util";

const url = process.env.REVIEW_URL;
const site = process.env.REVIEW_SITE;
const sheet = process.env.REVIEW_SHEET;
const shots = process.env.SCREENSHOT_DIR || ".";
const chromiumPath = process.env.CHROMIUM || "/usr/bin/chromium";
const origin = new URL(url).origin;
const token = new URL(url).searchParams.get("t");
fs.mkdirSync(shots, { recursive: true });

let checks = 0;
function check(cond, what) { assert.ok(cond, what); checks += 1; }
function disk() { return JSON.parse(fs.readFileSync(path.join(site, "labels", sheet + ".json"), "utf8")); }
function sym(doc, id) { return doc.symbols.find((s) => s.id === id); }
const sameBox = (a, b) => a.x === b.x && a.y === b.y && a.w === b.w && a.h === b.h;

const browser = await chromium.launch({
  executablePath: chromiumPath,
  args: ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run",
    // A foreign name that resolves to this machine: what a DNS-rebinding page would use.
    "--host-resolver-rules=MAP rebind.test 127.0.0.1"],
});
const context = await browser.newContext({ viewport: { width: 1280, height: 800 }, deviceScaleFactor: 2 });
const foreign = [], errors = [];
context.on("request", (r) => {
  const u = r.url();
  if (!u.startsWith(origin + "/") && !u.startsWith("data:") && !u.startsWith("blob:")) foreign.push(u);
});
const watch = (p) => {
  p.on("pageerror", (e) => errors.push(String(e)));
  p.on("console", (m) => { if (m.type() === "error" && !/409|Conflict|Failed to load resource/.test(m.text())) errors.push(m.text()); });
};

async function saved(p) {
  try {
    await p.waitForFunction(() => {
      const S = window.__review;
      return document.getElementById("save-status").dataset.state === "saved" && !S.pending.length && !S.inflight;
    }, null, { timeout: 15000 });
  } catch (e) {
    await p.screenshot({ path: path.join(shots, "not-saved.png") });
    const why = await p.evaluate(() => [document.getElementById("save-status").textContent, document.getElementById("refused-text").textContent, document.getElementById("conflict-text").textContent, window.__review.pending.length]);
    throw new Error("the page did not report all changes saved: " + JSON.stringify(why));
  }
}
async function ready(p) {
  try {
    await p.waitForSelector("body[data-ready='1']", { state: "attached", timeout: 15000 });
  } catch (e) {
    await p.screenshot({ path: path.join(shots, "not-ready.png") });
    const why = await p.evaluate(() => { const S = window.__review; return { id: S.id, pyr: S.pyr, tiles: [...S.tiles].map(([k, v]) => k + ":" + (v === "loading" ? "L" : "ok")), ready: S.ready, scale: S.scale, loading: S.loading, notice: document.getElementById("notice-text").textContent }; });
    throw new Error("the sheet never became usable: " + JSON.stringify(why));
  }
}
async function state(p) { return p.evaluate(() => { const S = window.__review; return { sel: S.sel, scale: S.scale, ox: S.ox, oy: S.oy, local: S.local }; }); }
async function toScreen(p, x, y) {
  const r = await p.locator("#canvas").boundingBox();
  const s = await state(p);
  return [r.x + (x - s.ox) * s.scale, r.y + (y - s.oy) * s.scale];
}

// ---- 1. the sheet list ------------------------------------------------------
const page = await context.newPage();
watch(page);
const t0 = Date.now();
await page.goto(url);
await page.waitForSelector(`#sheets tr[data-id='${sheet}']`);
const row = await page.locator(`#sheets tr[data-id='${sheet}']`).innerText();
check(/\bno\b/.test(row), "the sheet is listed as not reviewed: " + row);
await page.selectOption("#f-state", "reviewed");
check((await page.locator("#sheets tbody tr").count()) === 0, "the 'reviewed' filter hides it");
await page.selectOption("#f-state", "proposals");
check((await page.locator("#sheets tbody tr").count()) === 1, "the 'with proposals' filter shows it");
await page.screenshot({ path: path.join(shots, "list.png") });

// ---- 2. open by keyboard, draw a box, set its class -------------------------
await page.locator("body").press("Enter");
await ready(page);
console.log(`sheet usable ${Date.now() - t0} ms after the list was requested`);
const classes = await page.evaluate(() => fetch("/api/session", { headers: { "X-Symtrust-Token": new URLSearchParams(location.search).get("t") } }).then((r) => r.json()).then((j) => j.classes.map((c) => c.name)));
const before = disk();
await page.keyboard.press("b");
const [ax, ay] = await toScreen(page, 20, 20);
const [bx, by] = await toScreen(page, 60, 55);
await page.mouse.move(ax, ay); await page.mouse.down(); await page.mouse.move((ax + bx) / 2, (ay + by) / 2); await page.mouse.move(bx, by); await page.mouse.up();
await page.keyboard.press("2");
await saved(page);
let doc = disk();
const drawn = doc.symbols.filter((s) => s.origin.kind === "manual" && !sym(before, s.id));
check(drawn.length === 1, "one box drawn by hand is on disk");
check(drawn[0].class === classes[1], `its class is the second site class (${drawn[0].class})`);
check(drawn[0].state === "accepted" && Math.abs(drawn[0].box.x - 20) < 1 && Math.abs(drawn[0].box.w - 40) < 1, "at the drawn place: " + JSON.stringify(drawn[0].box));
check(doc.revision > before.revision && doc.revision <= before.revision + 2, "both actions saved (one save each, or one for both when the second came before the first went out)");

// ---- 3. proposals: accept, reject, correct, undo ----------------------------
await page.keyboard.press("Escape");
const order = before.symbols.filter((s) => s.origin.kind === "proposed" && s.state === "draft").sort((a, b) => b.origin.score - a.origin.score).map((s) => s.id);
check(order.length >= 5, "the fixture has five proposals");
await page.keyboard.press("Tab");
check((await state(page)).sel.id === order[0], "Tab selects the highest-scored proposal");
await page.screenshot({ path: path.join(shots, "proposal.png") });
await page.keyboard.press("a");
check((await state(page)).sel.id === order[1], "accepting steps to the next proposal");
await page.keyboard.press("r");
await page.keyboard.press("Shift+ArrowRight");
await page.keyboard.press("3");
await page.keyboard.press("a");
await saved(page);
doc = disk();
const p0 = sym(doc, order[0]), p1 = sym(doc, order[1]), p2 = sym(doc, order[2]);
check(p0.state === "accepted" && sameBox(p0.box, p0.origin.proposed_box) && p0.class === p0.origin.proposed_class, "first proposal accepted unchanged");
check(p1.state === "rejected", "second proposal rejected");
check(p2.state === "accepted" && p2.box.x === p2.origin.proposed_box.x + 10 && p2.class === classes[2], "third proposal corrected (moved 10 px, class 3) and accepted");
check([p0, p1, p2].every((s) => s.by === "browser-reviewer"), "each decision records who");
await page.keyboard.press("Control+z");
await saved(page);
doc = disk();
check(sym(doc, order[2]).state === "draft" && sym(doc, order[2]).box.x === p2.box.x, "undo took back the last accept and kept the move");
await page.keyboard.press("Control+y");
await saved(page);
check(disk().symbols.find((s) => s.id === order[2]).state === "accepted", "redo accepted it again");
await page.keyboard.press("Control+z");
await saved(page);
// The scene is copied from chunks drawn earlier (review/page/index.html, "the
// scene cache"): after the edits above, a pan and a zoom, the copy must match a
// frame drawn anew from the data (no box left where it was, no seam between
// chunks). A part repainted after an edit is drawn under a clip, where the
// rasteriser may round the edge pixels of thin dotted lines a few levels
// differently (up to 5 of 255 seen), so 8 levels per channel are allowed; a box
// left behind or missing differs by far more (its line colour on paper).
// Both are taken once every tile is here, the chunks in view are drawn, and ten
// frames more have been drawn with no tile asked for again (chunks drawn before
// a tile arrived are drawn again a few a frame).
async function canvasPixels(p, name, fresh) {
  if (fresh) await p.evaluate(() => { window.__sceneCache.doc = null; });
  for (;;) {
    await p.waitForFunction(() => window.__review.loading === 0);
    // A view that jumped is drawn directly until its chunks are drawn in idle time.
    await p.waitForFunction(() => { const L = window.__sceneCache.cur; return L && L.scale === window.__review.scale && absent(L) === 0; });
    const loading = await p.evaluate((name) => new Promise((done) => {
      let n = 0;
      const frame = () => {
        if (n++ < 10) { requestDraw(); requestAnimationFrame(frame); return; }
        const c = document.getElementById("canvas");
        (window.__snap = window.__snap || {})[name] = c.getContext("2d").getImageData(0, 0, c.width, c.height).data;
        done(window.__review.loading);
      };
      frame();
    }), name);
    if (loading === 0) return;
  }
}
// The rejected proposal is brought into view first; V shows and hides it.
await page.keyboard.press("Escape");
await page.evaluate((id) => { const S = window.__review, b = S.local.symbols.find((s) => s.id === id).box; S.ox = b.x - 200 / S.scale; S.oy = b.y - 150 / S.scale; requestDraw(); }, order[1]);
for (const keys of [[], ["v"], ["v"], ["ArrowLeft", "ArrowUp"], ["-", "-"], ["+", "+", "+"]]) {
  for (const k of keys) await page.keyboard.press(k);
  await page.waitForTimeout(300);
  await canvasPixels(page, "cached", false);
  await canvasPixels(page, "fresh", true);
  const [worst, off] = await page.evaluate(() => {
    const a = window.__snap.cached, b = window.__snap.fresh;
    let worst = 0, off = 0;
    for (let i = 0; i < a.length; i++) { const d = Math.abs(a[i] - b[i]); if (d) { off += 1; if (d > worst) worst = d; } }
    return [worst, off];
  });
  check(worst <= 8, `the cached scene matches a fresh drawing after ${keys.join(", ") || "the edits"} (largest difference ${worst} in ${off} channel values)`);
}

// ---- 4. reload: the page shows what is on disk ------------------------------
await page.reload();
await ready(page);
const afterReload = (await state(page)).local;
check(isDeepStrictEqual(afterReload, disk()), "after a reload the page holds exactly the document on disk");
// Zoom to the corrected proposal for a look at the styles.
await page.keyboard.press("Tab");
await page.keyboard.press("-"); await page.keyboard.press("-");
await page.screenshot({ path: path.join(shots, "sheet.png") });

// ---- 5. two pages on one sheet: a conflict keeps the local edit -------------
await page.keyboard.press("Escape");
const page2 = await context.newPage();
watch(page2);
await page2.goto(url + "#/sheet/" + encodeURIComponent(sheet));
await ready(page2);
// Page 1 accepts the fourth proposal.
const target = order[3];
await page.evaluate((id) => { window.__review.sel = { kind: "sym", id }; }, target);
await page.keyboard.press("a");
await saved(page);
// Page 2, still at the old revision, rejects the same proposal.
await page2.bringToFront();
await page2.evaluate((id) => { window.__review.sel = { kind: "sym", id }; }, target);
await page2.keyboard.press("r");
await page2.waitForSelector("#conflict.show", { timeout: 10000 });
const banner = await page2.locator("#conflict-text").innerText();
check(/browser-reviewer/.test(banner) && /revision/.test(banner), "the conflict message names who saved and the revision: " + banner);
check((await page2.evaluate((id) => window.__review.local.symbols.find((s) => s.id === id).state, target)) === "rejected", "page 2 keeps its edit visible");
check(sym(disk(), target).state === "accepted", "page 2 did not overwrite page 1's save");
await page2.screenshot({ path: path.join(shots, "conflict.png") });
await page2.click("#reapply");
await saved(page2);
check(sym(disk(), target).state === "rejected", "after reload and re-apply page 2's change is saved on top");
check(!(await page2.locator("#conflict.show").count()), "the conflict banner is gone");
await page2.close();

// ---- 6. a save that fails once is retried and shown -------------------------
await page.bringToFront();
await page.reload();
await ready(page);
let puts = 0;
await page.route("**/api/sheets/**", (route) => {
  if (["PUT", "PATCH"].includes(route.request().method())) {
    puts += 1;
    if (puts === 1) return route.abort("failed");
  }
  return route.continue();
});
const retried = order[4];
await page.evaluate((id) => { window.__review.sel = { kind: "sym", id }; }, retried);
await page.keyboard.press("a");
await page.waitForSelector("#save-status[data-state='retrying']", { timeout: 5000 });
const shown = await page.locator("#save-status").innerText();
check(/retry/i.test(shown), "the failed save is shown: " + shown);
await page.screenshot({ path: path.join(shots, "retry.png") });
await saved(page);
check(puts === 2, `the save was sent twice (${puts})`);
check(sym(disk(), retried).state === "accepted", "the retried save reached the disk");
await page.unroute("**/api/sheets/**");

// ---- 7. the reviewer names themselves; edges moved from the left and top ---
const hand = drawn[0].id;
await page.fill("#reviewer", "Zoë Park");
await page.press("#reviewer", "Enter");
await page.keyboard.press("Escape");
await page.evaluate((id) => { window.__review.sel = { kind: "sym", id }; }, hand);
const handBefore = sym(disk(), hand).box;
await page.keyboard.press("Shift+Alt+ArrowLeft");
await page.keyboard.press("Alt+ArrowDown");
await saved(page);
const handAfter = sym(disk(), hand);
check(handAfter.box.x === handBefore.x - 10 && handAfter.box.w === handBefore.w + 10, "Shift+Alt+Left moved the left edge 10 px out, the right edge stayed: " + JSON.stringify(handAfter.box));
check(handAfter.box.y === handBefore.y + 1 && handAfter.box.h === handBefore.h - 1, "Alt+Down moved the top edge 1 px down, the bottom edge stayed: " + JSON.stringify(handAfter.box));
check(handAfter.by === "Zoë Park" && disk().changed_by === "Zoë Park", `the change is recorded as the named reviewer's (${handAfter.by})`);
check(sym(disk(), order[0]).by === "browser-reviewer", "earlier decisions keep who made them");
await page.reload();
await ready(page);
check((await page.inputValue("#reviewer")) === "Zoë Park", "the name is kept in the browser across reloads");
await page.screenshot({ path: path.join(shots, "reviewer.png") });

// ---- 8. hostile requests ----------------------------------------------------
const traversal = await page.evaluate(async (t) => {
  const out = [];
  for (const p of ["/api/sheets/..%2F..%2Fsite.toml", "/api/sheets/%2e%2e/tiles", "/api/sheets/%252e%252e"]) {
    const r = await fetch(p, { headers: { "X-Symtrust-Token": t } });
    out.push([p, r.status, await r.text()]);
  }
  return out;
}, token);
// The browser itself folds "%2e%2e" into ".." and removes it, so that request
// arrives as /api/sheets/tiles: refused as an unknown sheet (404), never served.
for (const [p, status, body] of traversal) check((status === 400 || status === 404) && !body.includes("schema_version =") && !body.includes("[[classes]]"), `${p} is refused (${status})`);
const noToken = await page.evaluate(() => fetch("/api/sheets").then((r) => r.status));
check(noToken === 403, "an API request without the token is refused");
const rebind = await browser.newContext();
const rp = await rebind.newPage();
const port = new URL(url).port;
const resp = await rp.goto(`http://rebind.test:${port}/?t=${token}`);
check(resp.status() === 421, `a page reached under a foreign Host name is refused (${resp.status()})`);
await rebind.close();

check(foreign.length === 0, "no request left the server: " + foreign.join(", "));
check(errors.length === 0, "no script errors: " + errors.join(" | "));
await browser.close();
console.log(`${checks} passed, 0 failed`);
