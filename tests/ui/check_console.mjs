// End-to-end check of the operator console (/ui) in Debian's headless Chromium, driven by the
// npm package playwright-core. The reference for every drawn arc is the service's own JSON API,
// called directly from this script with the same request.
//
// Environment: BASE (http://127.0.0.1:PORT), TOKEN (admin token), MODEL (name), V1 (served
// version), V2 (version to promote), TOKENS (a sentence, space-separated), MAX_TOKENS (the
// server's limit), OUT (folder for screenshots).
import { chromium } from "playwright-core";
import { mkdirSync } from "node:fs";

const env = (name) => {
  const value = process.env[name];
  if (!value) throw new Error(`${name} is not set`);
  return value;
};
const BASE = env("BASE"), TOKEN = env("TOKEN"), MODEL = env("MODEL"), V1 = env("V1"), V2 = env("V2");
const TOKENS = env("TOKENS").split(" ");
const MAX_TOKENS = Number(env("MAX_TOKENS"));
const LONGEST = JSON.parse(env("LONGEST")); // the ten longest test sentences, as token lists
const OUT = env("OUT");
mkdirSync(OUT, { recursive: true });

const failures = [];
let passed = 0;
function check(ok, message) {
  console.log((ok ? "ok   " : "FAIL ") + message);
  if (ok) passed++;
  else failures.push(message);
}

async function apiParse(body) {
  const response = await fetch(BASE + "/v1/parse", {
    method: "POST",
    headers: { "content-type": "application/json" },
    body: JSON.stringify(body),
  });
  return { status: response.status, body: await response.json() };
}

async function arcsOf(page, selector = "#diagrams .diagram") {
  return page.$$eval(`${selector} svg.tree path.arc`, (paths) =>
    paths.map((p) => ({
      head: Number(p.dataset.head),
      dependent: Number(p.dataset.dependent),
      label: p.dataset.label,
      confidence: p.dataset.confidence,
      crossing: p.classList.contains("crossing"),
    })));
}

const browser = await chromium.launch({
  executablePath: "/usr/bin/chromium",
  headless: true,
  args: ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync"],
});
const origin = new URL(BASE).origin;
const outside = [];
const pageErrors = [];

async function openPage(viewport) {
  const context = await browser.newContext({ viewport });
  // Every request the page makes must go to the service itself; anything else is recorded and
  // refused.
  await context.route("**/*", (route) => {
    const url = route.request().url();
    if (new URL(url).origin !== origin) {
      outside.push(url);
      return route.abort();
    }
    return route.continue();
  });
  const page = await context.newPage();
  page.on("pageerror", (error) => pageErrors.push(String(error)));
  page.on("console", (message) => {
    // The browser logs every 4xx answer as a console error; the bad-input steps cause those on
    // purpose. Anything else logged as an error counts.
    if (message.type() === "error" && !message.text().startsWith("Failed to load resource")) {
      pageErrors.push("console: " + message.text());
    }
  });
  await page.goto(BASE + "/ui");
  return page;
}

try {
  const page = await openPage({ width: 1280, height: 800 });
  const parseBodies = [];
  page.on("request", (request) => {
    if (request.url().endsWith("/v1/parse")) parseBodies.push(JSON.parse(request.postData() || "{}"));
  });

  // 1. The served model and version.
  await page.waitForSelector(`[data-serving-model="${MODEL}"][data-serving-version="${V1}"]`, { timeout: 15000 });
  const status = await page.textContent("#status");
  check(status.includes(MODEL) && status.includes(V1), `status line names the served model and version: ${status.trim()}`);
  const rows = await page.$$eval(`[data-model="${MODEL}"] button.promote`, (b) => b.map((x) => x.dataset.version));
  check(rows.includes(V1) && rows.includes(V2), `every version of ${MODEL} is listed (${rows.length})`);
  await page.waitForSelector("#rollout-list .rollout-model", { timeout: 15000 });
  const rollout = await page.textContent("#rollout-list");
  check(rollout.includes(MODEL) && rollout.includes(`live ${V1}`) && rollout.includes("no candidate"),
    `the rollout panel shows the model, its live version and that it has no candidate: ${rollout.trim().slice(0, 120)}`);

  // 2. Parse a sentence (tokens), projective: one arc per token, the API's heads and labels.
  await page.fill("#sentence", TOKENS.join(" "));
  await page.check('input[name="input-kind"][value="tokens"]');
  await page.selectOption("#decoder-pick", "projective");
  await page.click("#parse-button");
  await page.waitForSelector("#diagrams svg.tree");
  let arcs = await arcsOf(page);
  let reference = await apiParse({ model: MODEL, tokens: TOKENS, decoder: "projective", confidence: true });
  let expected = reference.body.sentences[0].tokens;
  check(arcs.length === TOKENS.length, `projective: ${arcs.length} arcs drawn for ${TOKENS.length} tokens`);
  check(JSON.stringify(arcs.map((a) => [a.dependent, a.head, a.label])) ===
    JSON.stringify(expected.map((t) => [t.id, t.head, t.label])),
    "projective: every arc has the API's head and label");
  const labelsShown = await page.$$eval("#diagrams svg.tree text.arc-label", (t) => t.map((x) => x.textContent));
  check(JSON.stringify(labelsShown) === JSON.stringify(expected.map((t) => t.label)),
    "projective: the label text on the arcs is the API's labels");
  check(!arcs.some((a) => a.crossing), "projective: no arc is marked as crossing");
  const withConfidence = expected.filter((t) => typeof t.confidence === "number").length;
  check(arcs.filter((a) => a.confidence !== "").length === withConfidence,
    `confidence drawn for the ${withConfidence} arcs the API gave one`);
  const tableRows = await page.$$eval("#tables table.parse-table tbody tr", (r) => r.length);
  check(tableRows === TOKENS.length, `table view has one row per token (${tableRows})`);
  const conllu = await page.textContent("#conllu-text");
  const conlluRows = conllu.split("\n").filter((l) => /^\d+\t/.test(l)).map((l) => l.split("\t"));
  check(conlluRows.length === TOKENS.length && conlluRows.every((c, i) => c.length === 10 &&
    c[1] === expected[i].form && Number(c[6]) === expected[i].head && c[7] === expected[i].label),
    "CoNLL-U view: ten columns, the API's forms, heads and labels");
  await page.screenshot({ path: `${OUT}/console-1280-projective.png`, fullPage: true });

  // 3. Switch decoder.
  await page.selectOption("#decoder-pick", "non-projective");
  await page.click("#parse-button");
  await page.waitForFunction(() => document.querySelector("#result-meta")?.textContent.includes("non-projective"));
  arcs = await arcsOf(page);
  reference = await apiParse({ model: MODEL, tokens: TOKENS, decoder: "non-projective", confidence: true });
  expected = reference.body.sentences[0].tokens;
  check(parseBodies.at(-1).decoder === "non-projective", "the page asked for the non-projective decoder");
  check(arcs.length === TOKENS.length && JSON.stringify(arcs.map((a) => [a.head, a.label])) ===
    JSON.stringify(expected.map((t) => [t.head, t.label])), "non-projective: the API's tree is drawn");

  // 4. Side by side.
  await page.check("#compare-pick");
  await page.click("#parse-button");
  await page.waitForFunction(() => document.querySelectorAll("#diagrams .diagram").length === 2);
  const titles = await page.$$eval("#diagrams .diagram", (d) => d.map((x) => x.dataset.decoder));
  check(titles.length === 2 && titles[0].includes("projective") && titles[1].includes("non-projective"),
    `comparison shows both decoders: ${titles.join(" | ")}`);
  const both = await arcsOf(page);
  check(both.length === 2 * TOKENS.length, "comparison: one arc per token in each diagram");
  await page.screenshot({ path: `${OUT}/console-1280-compare.png`, fullPage: true });

  // 4b. The ten longest test sentences, both decoders: every tree whole and full width, no two
  // label boxes intersect, every arc inside its drawing.
  let geometryProblems = [];
  for (const [k, tokens] of LONGEST.entries()) {
    await page.fill("#sentence", tokens.join(" "));
    await page.click("#parse-button");
    await page.waitForFunction((n) => {
      const trees = document.querySelectorAll("#diagrams svg.tree");
      return trees.length === 2 && [...trees].every((t) => t.querySelectorAll("path.arc").length === n);
    }, tokens.length);
    const problems = await page.evaluate(() => {
      const found = [];
      const boxOf = (node) => node.getBBox();
      const meets = (a, b) => a.x < b.x + b.width - 0.5 && b.x < a.x + a.width - 0.5 &&
        a.y < b.y + b.height - 0.5 && b.y < a.y + a.height - 0.5;
      const area = document.querySelector("#diagrams").getBoundingClientRect();
      document.querySelectorAll("#diagrams .diagram").forEach((diagram) => {
        const tree = diagram.querySelector("svg.tree");
        const name = diagram.dataset.decoder;
        const width = Number(tree.getAttribute("width")), height = Number(tree.getAttribute("height"));
        const boxes = [...tree.querySelectorAll("rect.label-box")].map(boxOf);
        for (let i = 0; i < boxes.length; i++) {
          for (let j = i + 1; j < boxes.length; j++) {
            if (meets(boxes[i], boxes[j])) found.push(`${name}: label boxes ${i + 1} and ${j + 1} intersect`);
          }
        }
        [...tree.querySelectorAll("path.arc"), ...tree.querySelectorAll("rect.label-box")].forEach((node) => {
          const b = boxOf(node);
          if (b.x < -0.5 || b.y < -0.5 || b.x + b.width > width + 0.5 || b.y + b.height > height + 0.5) {
            found.push(`${name}: arc to ${node.dataset.dependent} leaves the drawing`);
          }
        });
        if (diagram.getBoundingClientRect().width < area.width - 2) found.push(`${name}: not full width`);
      });
      return found;
    });
    geometryProblems = geometryProblems.concat(problems.map((p) => `sentence of ${tokens.length} words: ${p}`));
    if (k === 0) await page.screenshot({ path: `${OUT}/console-1280-compare-longest.png`, fullPage: true });
  }
  check(geometryProblems.length === 0,
    `ten longest test sentences (${LONGEST.map((t) => t.length).join(", ")} words), both decoders: ` +
    `no label boxes intersect, every arc inside its drawing, trees full width` +
    (geometryProblems.length ? `: ${geometryProblems.slice(0, 5).join("; ")}` : ""));

  // 4c. The layered view: one line per word, indented by depth, heads before their dependents.
  await page.selectOption("#view-pick", "layers");
  await page.waitForSelector("#diagrams ol.layers");
  const layers = await page.$$eval("#diagrams ol.layers", (lists) => lists.map((list) =>
    [...list.querySelectorAll("li")].map((li) => [Number(li.dataset.dependent), Number(li.dataset.head)])));
  const longest = LONGEST.at(-1);
  check(layers.length === 2 && layers.every((lines) => lines.length === longest.length &&
    lines.every(([d, h], i) => h === 0 || lines.slice(0, i).some(([e]) => e === h))),
    `layers: ${longest.length} lines per tree, every head before its dependents`);
  await page.screenshot({ path: `${OUT}/console-1280-layers.png`, fullPage: true });
  await page.selectOption("#view-pick", "arcs");
  await page.uncheck("#compare-pick");

  // 5. Keyboard: Ctrl+Enter in the text box parses.
  await page.fill("#sentence", TOKENS.slice(0, 5).join(" "));
  await page.focus("#sentence");
  await page.keyboard.press("Control+Enter");
  await page.waitForFunction(() => document.querySelectorAll("#diagrams svg.tree path.arc").length === 5);
  check(true, "Ctrl+Enter in the text box parses");

  // 6. Bad input shows the API's own message, and the page keeps working.
  await page.check('input[name="input-kind"][value="text"]');
  await page.fill("#sentence", "   ");
  await page.click("#parse-button");
  await page.waitForSelector("#parse-error:not([hidden])");
  const emptyReference = await apiParse({ model: MODEL, text: "   " });
  let shown = await page.textContent("#parse-error");
  check(emptyReference.status === 400 && shown.includes(emptyReference.body.error.message),
    `empty input: "${shown.trim()}" carries the API's message`);
  const tooLong = Array.from({ length: MAX_TOKENS + 1 }, (_, i) => TOKENS[i % TOKENS.length]);
  await page.check('input[name="input-kind"][value="tokens"]');
  await page.fill("#sentence", tooLong.join(" "));
  await page.click("#parse-button");
  await page.waitForFunction((n) => document.querySelector("#parse-error")?.textContent.includes(String(n)), MAX_TOKENS + 1);
  const longReference = await apiParse({ model: MODEL, tokens: tooLong });
  shown = await page.textContent("#parse-error");
  check(longReference.status === 400 && shown.includes(longReference.body.error.message),
    `over the length limit: "${shown.trim()}" carries the API's message`);
  await page.screenshot({ path: `${OUT}/console-1280-error.png`, fullPage: true });
  await page.fill("#sentence", TOKENS.join(" "));
  await page.click("#parse-button");
  await page.waitForFunction((n) => !document.querySelector("#parse-result").hidden &&
    document.querySelectorAll("#diagrams svg.tree path.arc").length === n, TOKENS.length);
  check(await page.isHidden("#parse-error") && (await arcsOf(page)).length === TOKENS.length,
    "after an error the next parse works and the error is gone");

  // 7. Performance: latency by length with the slope guides.
  await page.waitForSelector("#latency-chart svg circle", { timeout: 15000 });
  const guides = await page.$$eval("#latency-chart svg text", (t) => t.map((x) => x.textContent));
  check(guides.includes("slope 2") && guides.includes("slope 3"), "latency chart draws the slope-2 and slope-3 guides");
  const caption = await page.textContent("#latency-caption");
  const fitted = [...caption.matchAll(/fitted slope [\d.]+ \(R² [\d.-]+, (\d+) recent sentences/g)].map((m) => Number(m[1]));
  check(fitted.every((n) => n >= 50) && (fitted.length > 0 || caption.includes("a slope is shown from 50 sentences")),
    `no slope from fewer than 50 sentences: "${caption.trim()}"`);
  // The decode stage: observed medians, the cost-model curve and the decoder probe's squares on
  // one log–log plot (the probe ran at start).
  await page.selectOption("#stage-pick", "decode");
  await page.waitForFunction(() => document.querySelectorAll("#latency-chart svg rect.probe").length >= 10, null, { timeout: 15000 });
  const decodeCaption = await page.textContent("#latency-caption");
  const curves = await page.$$eval("#latency-chart svg path.cost-model", (p) => p.length);
  check(curves >= 1 && /projective probe: slope [\d.]+ .* consistent/.test(decodeCaption),
    `decode stage: ${curves} cost-model curves, the probe's 10 points and verdicts: "${decodeCaption.trim().slice(0, 160)}…"`);
  await page.screenshot({ path: `${OUT}/console-1280-decode-scaling.png`, fullPage: true });
  await page.selectOption("#stage-pick", "total");
  await page.waitForSelector("#traffic-chart svg path.traffic-line", { timeout: 15000 });
  check(true, "traffic chart draws requests per second");

  // 8. Promote: a wrong token is refused with the API's message; the right one moves `live`.
  await page.fill("#admin-token", "not-the-token-at-all");
  await page.click(`[data-model="${MODEL}"] button.promote[data-version="${V2}"]`);
  await page.waitForFunction((m) => document.querySelector(`[data-model="${m}"] .admin-message`)?.textContent.includes("failed"), MODEL);
  shown = await page.textContent(`[data-model="${MODEL}"] .admin-message`);
  check(/token|auth/i.test(shown), `a wrong admin token is refused: "${shown.trim()}"`);
  await page.fill("#admin-token", TOKEN);
  await page.click(`[data-model="${MODEL}"] button.promote[data-version="${V2}"]`);
  await page.waitForSelector(`[data-serving-model="${MODEL}"][data-serving-version="${V2}"]`, { timeout: 30000 });
  check(true, `after promote the page shows ${V2} being served`);
  const swapText = await page.textContent(`[data-model="${MODEL}"] table.swaps`);
  check(swapText.includes(V1) && swapText.includes(V2), "the swap from the old to the new version is listed");
  await page.screenshot({ path: `${OUT}/console-1280-promoted.png`, fullPage: true });
  const rollbackLabel = await page.textContent(`[data-model="${MODEL}"] p button`);
  check(rollbackLabel.includes(V1), `rollback offers the previous live version: "${rollbackLabel.trim()}"`);

  // 9. Phone width: no sideways scrolling of the page itself; the diagram scrolls in its box.
  const phone = await openPage({ width: 390, height: 844 });
  await phone.waitForSelector(`[data-serving-version="${V2}"]`, { timeout: 15000 });
  await phone.fill("#sentence", TOKENS.join(" "));
  await phone.check('input[name="input-kind"][value="tokens"]');
  await phone.click("#parse-button");
  await phone.waitForSelector("#diagrams svg.tree");
  const overflow = await phone.evaluate(() => document.documentElement.scrollWidth - window.innerWidth);
  check(overflow <= 1, `phone width 390 px: the page does not scroll sideways (overflow ${overflow} px)`);
  await phone.screenshot({ path: `${OUT}/console-390-phone.png`, fullPage: true });

  // 10. A replica without an admin token: the admin controls are hidden and the page says why.
  const bare = await browser.newPage({ viewport: { width: 1280, height: 900 } });
  await bare.goto(env("BASE_NO_ADMIN") + "/ui");
  await bare.waitForSelector(`[data-model="${MODEL}"]`, { timeout: 15000 });
  const adminShown = await bare.isVisible("#admin-row");
  const offNote = await bare.isVisible("#admin-off");
  const adminButtons = await bare.$$eval(`[data-model="${MODEL}"] button`, (b) => b.length);
  check(!adminShown && offNote && adminButtons === 0,
    `no admin token on the replica: token field hidden, a note says why, no promote or rollback buttons (${adminButtons})`);
  await bare.screenshot({ path: `${OUT}/console-1280-no-admin.png`, fullPage: true });
  await bare.close();

  check(outside.length === 0, `no request left the service (${outside.length}: ${outside.slice(0, 3).join(", ")})`);
  check(pageErrors.length === 0, `no script errors in the page (${pageErrors.slice(0, 3).join(" | ")})`);
} catch (error) {
  failures.push(String(error && error.stack || error));
  console.log("FAIL " + (error && error.stack || error));
} finally {
  await browser.close();
}
console.log(`\n${passed} passed, ${failures.length} failed`);
process.exit(failures.length ? 1 : 0);
