// Opens a notebook in a running JupyterLab with Debian's chromium (driven by
// playwright-core), runs every cell through the Run menu, waits until the
// kernel is idle and every code cell has an execution count, then reports
// what a reader would see: per code cell its prompt, its figures (each
// scrolled into view and measured) and its error outputs. A screenshot of the
// first figure in place is written for a person to look at.
//
// The assertions live in tests/python/test_browser_lab.py; this script only
// looks and reports, as JSON on stdout.
//
// usage: node lab_check.cjs <lab url with token> <notebook path> <screenshot.png> <user-data-dir>
'use strict';
const { chromium } = require('playwright-core');

const [labUrl, notebook, screenshotPath, userDataDir] = process.argv.slice(2);
const CHROMIUM = process.env.WAYPATH_CHROMIUM || '/usr/bin/chromium';
const RUN_TIMEOUT_MS = Number(process.env.WAYPATH_LAB_RUN_TIMEOUT_MS || 600000);
// Without the background-networking flags chromium keeps dialling Google's
// hosts, which this machine's closed network refuses.
const FLAGS = [
  '--no-sandbox',
  '--disable-gpu',
  '--disable-quic',
  '--no-first-run',
  '--disable-background-networking',
  '--disable-component-update',
  '--disable-sync',
];

async function main() {
  const context = await chromium.launchPersistentContext(userDataDir, {
    executablePath: CHROMIUM,
    headless: true,
    args: FLAGS,
    viewport: { width: 1400, height: 1000 },
  });
  const consoleErrors = [];
  let stage = 'opening the notebook';
  let page;
  try {
    page = context.pages()[0] || (await context.newPage());
    page.on('pageerror', (e) => consoleErrors.push(String(e)));
    const url = new URL(labUrl);
    const token = url.searchParams.get('token');
    await page.goto(`${url.origin}/lab/tree/${notebook}?token=${token}`);
    await page.locator('.jp-Notebook .jp-CodeCell').first().waitFor({ timeout: 120000 });
    stage = 'waiting for the kernel to start';
    await waitForKernelIdle(page, 120000);
    const kernelName = (await page.locator('.jp-NotebookPanel-toolbar [data-jp-item-name="kernelName"]').textContent()).trim();

    stage = 'choosing Run All Cells from the Run menu';
    await runAllFromMenu(page);
    stage = 'waiting for every code cell to run';
    await waitForAllCellsRun(page, RUN_TIMEOUT_MS);
    await waitForKernelIdle(page, 60000);

    stage = 'measuring the figures';
    const cells = await describeCells(page);
    await screenshotFirstFigure(page, screenshotPath);
    process.stdout.write(JSON.stringify({ kernelName, cells, consoleErrors, screenshot: screenshotPath }));
  } catch (e) {
    if (page) await page.screenshot({ path: screenshotPath.replace(/\.png$/, '') + '.failed.png' }).catch(() => {});
    throw new Error(`while ${stage}: ${e.message}`);
  } finally {
    await context.close();
  }
}

/**
 * A kernel is attached and idle. The toolbar's status dot reads "idle"
 * before any kernel is attached (its name then reads "No Kernel"), and a
 * Run All at that moment opens the kernel chooser instead of running.
 */
async function waitForKernelIdle(page, timeout) {
  await page.waitForFunction(
    () => {
      const bar = document.querySelector('.jp-NotebookPanel-toolbar');
      const status = bar && bar.querySelector('[data-jp-item-name="executionProgress"] [data-status]');
      const name = bar && bar.querySelector('[data-jp-item-name="kernelName"]');
      const attached = name && !['', 'No Kernel'].includes(name.textContent.trim());
      return attached && status.getAttribute('data-status') === 'idle';
    },
    null,
    { timeout },
  );
}

/** Run ▸ Run All Cells, clicked as a reader would. */
async function runAllFromMenu(page) {
  await page.locator('.lm-MenuBar-itemLabel', { hasText: /^Run$/ }).click();
  await page.locator('.lm-Menu-itemLabel', { hasText: /^Run All Cells$/ }).click();
}

/** Every code cell's prompt shows an execution count (not `[*]` or blank). */
async function waitForAllCellsRun(page, timeout) {
  await page.waitForFunction(
    () => {
      const prompts = [...document.querySelectorAll('.jp-Notebook .jp-CodeCell .jp-InputPrompt')];
      return prompts.length > 0 && prompts.every((p) => /^\[\d+\]:$/.test(p.textContent.trim()));
    },
    null,
    { timeout, polling: 500 },
  );
}

async function describeCells(page) {
  const cells = page.locator('.jp-Notebook .jp-CodeCell');
  const out = [];
  for (let i = 0; i < (await cells.count()); i++) {
    const cell = cells.nth(i);
    await cell.scrollIntoViewIfNeeded();
    const prompt = (await cell.locator('.jp-InputPrompt').textContent()).trim();
    const errors = await cell
      .locator('.jp-OutputArea-output[data-mime-type="application/vnd.jupyter.stderr"]')
      .allInnerTexts();
    const figures = [];
    const images = cell.locator('.jp-RenderedSVG img, .jp-RenderedSVG svg');
    for (let k = 0; k < (await images.count()); k++) {
      figures.push(await measureFigure(images.nth(k)));
    }
    // Written results are Waypath's HTML (class wp-result); a JSON tree
    // viewer in their place would mean the reader sees raw structure.
    const written = await cell.locator('.jp-OutputArea-output .wp-result').count();
    const jsonTrees = await cell.locator('.jp-OutputArea-output .jp-RenderedJSON').count();
    out.push({ index: i, prompt, errors, figures, written, jsonTrees });
  }
  return out;
}

/** Size on screen, decoded size and CSS visibility of one rendered figure. */
async function measureFigure(figure) {
  await figure.scrollIntoViewIfNeeded();
  const box = await figure.boundingBox();
  const facts = await figure.evaluate(async (el) => {
    if (el.tagName === 'IMG' && !el.complete) {
      await new Promise((done) => el.addEventListener('load', done, { once: true }));
    }
    const style = getComputedStyle(el);
    const r = el.getBoundingClientRect();
    const cx = Math.min(Math.max(r.left + r.width / 2, 0), window.innerWidth - 1);
    const cy = Math.min(Math.max(r.top + r.height / 2, 0), window.innerHeight - 1);
    const onTop = document.elementFromPoint(cx, cy);
    return {
      tag: el.tagName.toLowerCase(),
      naturalWidth: el.naturalWidth ?? r.width,
      naturalHeight: el.naturalHeight ?? r.height,
      visibility: style.visibility,
      display: style.display,
      opacity: Number(style.opacity),
      uncovered: onTop === el || el.contains(onTop),
      title: el.tagName === 'IMG' ? decodeTitle(el.src) : (el.querySelector('title') || {}).textContent || '',
    };
    function decodeTitle(src) {
      try {
        const text = decodeURIComponent(src.slice(src.indexOf(',') + 1));
        const m = text.match(/<title>([^<]*)<\/title>/);
        return m ? m[1] : '';
      } catch (_) {
        return '';
      }
    }
  });
  return { width: box ? box.width : 0, height: box ? box.height : 0, ...facts };
}

async function screenshotFirstFigure(page, path) {
  const first = page.locator('.jp-RenderedSVG').first();
  if ((await first.count()) > 0) {
    await first.scrollIntoViewIfNeeded();
    await page.evaluate(() => new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r))));
  }
  await page.screenshot({ path });
}

main().catch((e) => {
  process.stderr.write(String(e && e.stack ? e.stack : e) + '\n');
  process.exit(1);
});
