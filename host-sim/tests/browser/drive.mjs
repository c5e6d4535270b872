// Drives headless Chromium over the DevTools protocol (Node's built-in
// WebSocket; run with `node --experimental-websocket` on Node 20) against a
// running `envord gateway web`, and prints what the pages show as one JSON
// document. Used by host-sim/tests/gateway_web.rs; exits non-zero with a
// message when the browser cannot start.
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, existsSync, writeFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

const env = process.env;
const BASE = env.BASE;
const CHROMIUM = env.CHROMIUM || 'chromium';
const SHOTS = env.SHOTS || '';
const fail = (m) => { console.error('browser test: ' + m); cleanup(); process.exit(2); };
setTimeout(() => fail('timed out after 90 s'), 90000).unref();

const profile = mkdtempSync(join(tmpdir(), 'envord-chromium-'));
const chrome = spawn(CHROMIUM, [
  '--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking',
  '--disable-component-update', '--disable-sync', '--no-first-run', '--disable-dev-shm-usage',
  '--hide-scrollbars', '--remote-debugging-port=0', '--remote-debugging-address=127.0.0.1',
  `--user-data-dir=${profile}`, 'about:blank',
], { stdio: ['ignore', 'ignore', 'pipe'] });
let chromeErr = '';
chrome.stderr.on('data', (d) => { chromeErr += d; });
chrome.on('error', (e) => fail(`cannot start ${CHROMIUM}: ${e.message}`));
function cleanup() { try { chrome.kill('SIGKILL'); } catch {} try { rmSync(profile, { recursive: true, force: true }); } catch {} }

async function devtoolsUrl() {
  const f = join(profile, 'DevToolsActivePort');
  for (let i = 0; i < 200; i++) {
    if (chrome.exitCode !== null) fail(`${CHROMIUM} exited (${chrome.exitCode}): ${chromeErr.slice(-800)}`);
    if (existsSync(f)) {
      const [port, path] = readFileSync(f, 'utf8').trim().split('\n');
      if (port && path) return `ws://127.0.0.1:${port}${path}`;
    }
    await new Promise((r) => setTimeout(r, 100));
  }
  fail(`${CHROMIUM} did not open its DevTools port in 20 s: ${chromeErr.slice(-800)}`);
}

let ws, nextId = 1;
const pending = new Map();
const listeners = [];
function send(method, params = {}, sessionId) {
  const id = nextId++;
  ws.send(JSON.stringify({ id, method, params, sessionId }));
  return new Promise((res, rej) => pending.set(id, { res, rej, method }));
}
function waitEvent(method, sessionId, ms = 20000) {
  return new Promise((res, rej) => {
    const t = setTimeout(() => rej(new Error(`no ${method} in ${ms} ms`)), ms);
    listeners.push({ method, sessionId, fn: (p) => { clearTimeout(t); res(p); } });
  });
}

async function newPage() {
  const { browserContextId } = await send('Target.createBrowserContext');
  const { targetId } = await send('Target.createTarget', { url: 'about:blank', browserContextId });
  const { sessionId } = await send('Target.attachToTarget', { targetId, flatten: true });
  await send('Page.enable', {}, sessionId);
  const page = {
    async setWidth(width, height = 900, mobile = false) {
      await send('Emulation.setDeviceMetricsOverride', { width, height, deviceScaleFactor: 1, mobile }, sessionId);
    },
    async go(url) {
      const loaded = waitEvent('Page.loadEventFired', sessionId);
      await send('Page.navigate', { url }, sessionId);
      await loaded;
    },
    async eval(expr) {
      const r = await send('Runtime.evaluate', { expression: expr, returnByValue: true, awaitPromise: true }, sessionId);
      if (r.exceptionDetails) throw new Error('evaluate: ' + JSON.stringify(r.exceptionDetails).slice(0, 400));
      return r.result.value;
    },
    async submit(expr) {
      // expr runs in the page and submits a form: wait for the next page.
      const loaded = waitEvent('Page.loadEventFired', sessionId);
      await this.eval(expr);
      await loaded;
    },
    async shot(name) {
      if (!SHOTS) return;
      const m = await send('Page.getLayoutMetrics', {}, sessionId);
      const s = m.cssContentSize || m.contentSize;
      const r = await send('Page.captureScreenshot', {
        format: 'png', captureBeyondViewport: true,
        clip: { x: 0, y: 0, width: Math.ceil(s.width), height: Math.min(Math.ceil(s.height), 2600), scale: 1 },
      }, sessionId);
      writeFileSync(join(SHOTS, name), Buffer.from(r.data, 'base64'));
    },
  };
  return page;
}

async function login(page, user, pass) {
  await page.go(`${BASE}/login`);
  await page.submit(`(() => { document.querySelector('#u').value = ${JSON.stringify(user)};
    document.querySelector('#p').value = ${JSON.stringify(pass)};
    document.querySelector('#login form').submit(); })()`);
}

const text = (sel) => `(document.querySelector(${JSON.stringify(sel)}) || {}).textContent || ''`;

async function main() {
  if (!BASE) fail('BASE is not set');
  ws = new WebSocket(await devtoolsUrl());
  await new Promise((res, rej) => { ws.onopen = res; ws.onerror = () => rej(new Error('DevTools WebSocket failed')); });
  ws.onmessage = (ev) => {
    const m = JSON.parse(ev.data);
    if (m.id && pending.has(m.id)) {
      const p = pending.get(m.id); pending.delete(m.id);
      if (m.error) p.rej(new Error(`${p.method}: ${m.error.message}`)); else p.res(m.result);
    } else if (m.method) {
      for (let i = listeners.length - 1; i >= 0; i--) {
        const l = listeners[i];
        if (l.method === m.method && l.sessionId === m.sessionId) { listeners.splice(i, 1); l.fn(m.params); }
      }
    }
  };
  const out = {};
  globalThis.partial = out;
  const version = await send('Browser.getVersion');
  out.browser = version.product;

  // 1. No session: any page answers with the login page.
  const anon = await newPage();
  await anon.setWidth(1280);
  await anon.go(`${BASE}${env.BEARING_PATH}`);
  out.unauth = { hasLogin: await anon.eval(`!!document.querySelector('#login form input[name=password]')`), title: await anon.eval('document.title') };
  await anon.shot('web-login.png');
  await login(anon, env.OP_USER, 'not the password');
  out.wrongPassword = await anon.eval(text('#login-error'));

  // 2. Operator: fleet, bearing, node, events; acknowledge one event.
  const op = await newPage();
  await op.setWidth(1280);
  await login(op, env.OP_USER, env.OP_PASS);
  out.afterLogin = await op.eval('location.pathname');
  out.fleet = await op.eval(`[...document.querySelectorAll('#channels tbody tr')].map(tr => ({
      node: +tr.dataset.node, bearing: +tr.dataset.bearing, state: tr.dataset.state,
      label: tr.querySelector('.st').textContent.trim() }))`);
  out.physical = await op.eval(`[...document.querySelectorAll('#physical tbody tr')].map(tr => ({
      name: tr.dataset.name, state: tr.querySelector('.st').dataset.state }))`);
  await op.shot('web-fleet.png');
  await op.go(`${BASE}/?state=danger`);
  out.fleetDanger = await op.eval(`[...document.querySelectorAll('#channels tbody tr')].map(tr => tr.dataset.state)`);
  await op.go(`${BASE}${env.BEARING_PATH}`);
  out.bearing = await op.eval(`[...document.querySelectorAll('section[data-kind] > svg g.series')].map(g => ({
      sensor: g.dataset.sensor, points: +g.dataset.points, valid: +g.dataset.valid,
      drawn: (g.querySelector('path.ln').getAttribute('d').match(/[ML]/g) || []).length,
      kind: g.closest('section').dataset.kind }))`);
  out.timeAxis = await op.eval(`[...document.querySelectorAll('svg text.axis')].some(t => t.textContent.startsWith('receive time'))`);
  out.eta = await op.eval(text('#eta'));
  await op.shot('web-bearing.png');
  await op.go(`${BASE}/node/${env.NODE}`);
  out.node = { statusFrames: await op.eval(`document.querySelectorAll('#status-frames tbody tr').length`), seqEvents: await op.eval(`document.querySelectorAll('#seq-events tbody tr').length`) };
  await op.shot('web-node.png');
  await op.go(`${BASE}/events`);
  out.events = await op.eval(`document.querySelectorAll('#events tbody tr').length`);
  out.opAckButtons = await op.eval(`document.querySelectorAll('#events button.ack').length`);
  // A forged form: the ack form with its CSRF token taken out.
  await op.submit(`(() => { const f = document.querySelector('#events form'); f.querySelector('input[name=csrf]').remove(); f.submit(); })()`);
  out.forged = await op.eval(text('#message'));
  await op.go(`${BASE}/events`);
  await op.submit(`document.querySelector('#events form').submit()`);
  out.ackNotice = await op.eval(text('#notice'));
  out.ackedRows = await op.eval(`[...document.querySelectorAll('#events tbody tr')].filter(tr => tr.textContent.includes(${JSON.stringify(env.OP_USER)} + ' at')).length`);
  await op.shot('web-events.png');

  // 3. Viewer: no acknowledge button; a submitted form with the viewer's own
  // valid token is refused for the role.
  const vw = await newPage();
  await vw.setWidth(390, 844, true);
  await login(vw, env.VIEW_USER, env.VIEW_PASS);
  await vw.shot('web-fleet-phone.png');
  await vw.go(`${BASE}/events`);
  out.viewer = { ackButtons: await vw.eval(`document.querySelectorAll('#events button.ack').length`), note: await vw.eval(text('#viewer-note')) };
  const id = await vw.eval(`(document.querySelector('#events tbody tr') || {dataset: {}}).dataset.event || ''`);
  await vw.submit(`(() => { const f = document.createElement('form'); f.method = 'post'; f.action = '/events/${id}/ack';
      const i = document.createElement('input'); i.type = 'hidden'; i.name = 'csrf';
      i.value = document.querySelector('header form input[name=csrf]').value; f.appendChild(i);
      document.body.appendChild(f); f.submit(); })()`);
  out.viewer.ackResult = await vw.eval(text('#message'));

  console.log(JSON.stringify(out));
  cleanup();
  process.exit(0);
}
main().catch((e) => fail((e.stack || String(e)) + '\nso far: ' + JSON.stringify(globalThis.partial || {})));
