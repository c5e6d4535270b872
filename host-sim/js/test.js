// Checks envord-codec.js against the Rust codec's vectors (vectors.json,
// written by wire/tests/frame_vectors.rs). Node built-ins only:
//   node host-sim/js/test.js
"use strict";
var assert = require("assert");
var fs = require("fs");
var path = require("path");
var codec = require("./envord-codec.js");

function hexBytes(h) {
  var out = [];
  for (var i = 0; i < h.length; i += 2) { out.push(parseInt(h.substr(i, 2), 16)); }
  return out;
}

// Deep equality; numbers within 1e-6 relative (Rust decodes in f32, JS in double).
function close(actual, expected, where) {
  if (typeof expected === "number") {
    assert.strictEqual(typeof actual, "number", where + ": expected number, got " + actual);
    var tol = 1e-6 * Math.max(Math.abs(expected), 1e-12);
    assert.ok(Math.abs(actual - expected) <= tol, where + ": " + actual + " vs " + expected);
  } else if (expected === null || typeof expected !== "object") {
    assert.strictEqual(actual, expected, where);
  } else if (Array.isArray(expected)) {
    assert.ok(Array.isArray(actual), where + ": expected array");
    assert.strictEqual(actual.length, expected.length, where + ": length");
    for (var i = 0; i < expected.length; i++) { close(actual[i], expected[i], where + "[" + i + "]"); }
  } else {
    assert.deepStrictEqual(Object.keys(actual).sort(), Object.keys(expected).sort(), where + ": keys");
    for (var k in expected) { close(actual[k], expected[k], where + "." + k); }
  }
}

var vectors = JSON.parse(fs.readFileSync(path.join(__dirname, "vectors.json"), "utf8"));
var n = 0;

// CRC catalogue check value (CRC-16/IBM-3740 alias CCITT-FALSE): 0x29B1 for "123456789".
assert.strictEqual(codec.crc16([49, 50, 51, 52, 53, 54, 55, 56, 57], 9), 0x29B1);
assert.deepStrictEqual([1, 2, 3, 4].map(codec.fullFrameLen), [30, 39, 49, 58]);
// binary32 decoding against the typed-array reference of the JS engine itself.
(function () {
  var dv = new DataView(new ArrayBuffer(4));
  [0, -0, 1, -2.5, 2519.8420410156, 3.4028234663852886e38, 1e-45, 1.17549435e-38, Infinity].forEach(function (x) {
    dv.setFloat32(0, x);
    var b = [dv.getUint8(0), dv.getUint8(1), dv.getUint8(2), dv.getUint8(3)];
    assert.strictEqual(codec.f32(b, 0), dv.getFloat32(0), "f32 of " + x);
  });
  assert.ok(isNaN(codec.f32([0x7f, 0xc0, 0, 0], 0)));
})();

vectors.valid.forEach(function (v, i) {
  var r = codec.decodeUplink({ bytes: hexBytes(v.hex), fPort: 10 });
  assert.deepStrictEqual(r.errors, [], "valid[" + i + "] " + v.hex + ": " + r.errors);
  close(r.data, v.expected, "valid[" + i + "]");
  n++;
});

vectors.invalid.forEach(function (v, i) {
  var r = codec.decodeUplink({ bytes: hexBytes(v.hex), fPort: 10 });
  assert.strictEqual(r.data, undefined, "invalid[" + i + "] decoded");
  assert.strictEqual(r.errors.length, 1, "invalid[" + i + "]");
  assert.strictEqual(r.errors[0].split(":")[0], v.error, "invalid[" + i + "] " + v.hex + ": " + r.errors[0]);
  n++;
});

// Input checks of the TS013 wrapper.
assert.ok(codec.decodeUplink({ bytes: [256], fPort: 10 }).errors[0].indexOf("BadInput") === 0);
assert.ok(codec.decodeUplink({ bytes: hexBytes(vectors.valid[0].hex), fPort: 0 }).errors[0].indexOf("BadInput") === 0);
assert.ok(codec.decodeUplink({}).errors[0].indexOf("BadInput") === 0);

// Random bytes never throw.
var seed = 12345;
function rnd() { seed = (seed * 1103515245 + 12345) % 2147483648; return seed; }
for (var t = 0; t < 20000; t++) {
  var len = rnd() % 64;
  var b = [];
  for (var j = 0; j < len; j++) { b.push(rnd() % 256); }
  if (rnd() % 2) { b[0] = 0x10 | (rnd() % 3); }
  var res = codec.decodeUplink({ bytes: b, fPort: 10 });
  assert.ok(Array.isArray(res.errors) && Array.isArray(res.warnings));
}

var statuses = vectors.valid.filter(function (v) { return v.expected.frame === "status"; }).length;
assert.ok(statuses >= 50, "status vectors: " + statuses);
console.log("envord-codec.js: " + n + " vectors ok (" + vectors.valid.length + " valid of which " + statuses + " status, " + vectors.invalid.length + " invalid), 20000 random payloads ok");
