// envord report frame decoder for LoRaWAN network servers.
//
// Follows the LoRa Alliance TS013 payload codec API: decodeUplink(input) with
// input.bytes (array of 0..255) and input.fPort, returning { data, errors,
// warnings }. Plain ES5 so it runs in the codec sandboxes of network servers.
// The frame format is docs/frame-format.md (version 1); this file mirrors the
// Rust decoder wire::frame and is checked against its vectors by test.js.
/* eslint-disable no-var */

var ENVORD_VERSION = 1;
var DEFECT_KINDS = ["bpfo", "bpfi", "ftf", "bsf"];
var ISO_ZONES = [null, "A", "B", "C", "D"];
var FLAG_NAMES = ["tach_missing", "tach_irregular", "speed_out_of_range", "clipping",
  "sensor_fault", "processing_overrun", "low_battery"];
var FULL_HEADER_LEN = 18;
var DEFECT_BITS = 19;
var REDUCED_LEN = 11;
var STATUS_LEN = 27;
var BAND_SOURCES = ["configured", "survey", "unset"];
var BOOT_CONFIGS = ["stored", "default_empty", "default_invalid"];
// Status frame codes (docs/frame-format.md, wire::frame::status).
var DOWNLINK_RESULTS = {
  0: "none", 1: "config_applied", 2: "measure_now", 3: "baseline_applied",
  4: "survey_requested", 5: "not_stored", 16: "truncated", 17: "unknown_version",
  18: "wrong_node", 19: "bad_tag", 20: "replayed", 21: "not_provisioned",
  22: "empty_command", 23: "unknown_command", 24: "invalid_config", 25: "invalid_baseline"
};
var SURVEY_STATES = ["not_run", "stored", "not_stored", "signal_fault", "flat",
  "too_few_samples", "no_band", "config", "unsupported"];

function fullFrameLen(bearings) {
  return FULL_HEADER_LEN + Math.ceil(bearings * 4 * DEFECT_BITS / 8) + 2;
}

// CRC-16/CCITT-FALSE: poly 0x1021, init 0xFFFF, no reflection, no xorout.
function crc16(bytes, len) {
  var crc = 0xFFFF;
  var i, j;
  for (i = 0; i < len; i++) {
    crc ^= bytes[i] << 8;
    for (j = 0; j < 8; j++) {
      crc = (crc & 0x8000) ? ((crc << 1) ^ 0x1021) & 0xFFFF : (crc << 1) & 0xFFFF;
    }
  }
  return crc;
}

function u16(bytes, off) {
  return (bytes[off] << 8) | bytes[off + 1];
}

function u32(bytes, off) {
  return ((bytes[off] << 24) >>> 0) + (bytes[off + 1] << 16) + (bytes[off + 2] << 8) + bytes[off + 3];
}

// IEEE 754 binary32, big-endian, without typed arrays (plain ES5 sandboxes).
// Returns NaN for NaN, +-Infinity for infinities.
function f32(bytes, off) {
  var bits = u32(bytes, off);
  var sign = bits >>> 31 ? -1 : 1;
  var exp = (bits >>> 23) & 0xFF;
  var frac = bits & 0x7FFFFF;
  if (exp === 0xFF) { return frac ? NaN : sign * Infinity; }
  if (exp === 0) { return sign * frac * Math.pow(2, -149); }
  return sign * (1 + frac / 8388608) * Math.pow(2, exp - 127);
}

// Linear field: code * step; the invalid code gives null.
function linear(code, step, invalid) {
  return code === invalid ? null : code * step;
}

// Amplitude code: 0 -> 0, 1..254 -> 1e-5 g * 10^((c-1)*0.5/20), 255 -> null.
function amplitude(code) {
  if (code === 0) { return 0; }
  if (code === 255) { return null; }
  return 1e-5 * Math.pow(10, (code - 1) * 0.5 / 20);
}

function score(code) {
  return code === 63 ? null : code;
}

function DecodeError(name, message) {
  this.name = name;
  this.message = name + ": " + message;
}

function flagsOf(bytes) {
  var bits = u16(bytes, 5);
  var flags = {};
  var i;
  if (bits & 0xFF80) {
    throw new DecodeError("ReservedBits", "spare flag bits set in byte 5");
  }
  for (i = 0; i < FLAG_NAMES.length; i++) {
    flags[FLAG_NAMES[i]] = (bits & (1 << i)) !== 0;
  }
  return flags;
}

function BitReader(bytes, start) {
  this.bytes = bytes;
  this.bit = start * 8;
}

BitReader.prototype.take = function (n) {
  var v = 0;
  var i, b;
  for (i = 0; i < n; i++) {
    b = (this.bytes[this.bit >> 3] >> (7 - (this.bit & 7))) & 1;
    v = v * 2 + b;
    this.bit++;
  }
  return v;
};

// Validates the envelope (version, type, length, CRC) and returns the type.
function checkEnvelope(bytes) {
  var version, type, expected, count, computed, received;
  if (bytes.length === 0) {
    throw new DecodeError("Truncated", "empty payload, a frame needs at least 11 bytes");
  }
  version = bytes[0] >> 4;
  type = bytes[0] & 0x0F;
  if (version !== ENVORD_VERSION) {
    throw new DecodeError("UnknownVersion", "format version " + version);
  }
  if (type === 0) {
    if (bytes.length < 8) {
      throw new DecodeError("Truncated", bytes.length + " bytes, frame needs " + fullFrameLen(0));
    }
    count = bytes[7] & 0x07;
    if (count > 4) {
      throw new DecodeError("TooManyBearings", "bearing count " + count);
    }
    expected = fullFrameLen(count);
  } else if (type === 1) {
    expected = REDUCED_LEN;
  } else if (type === 2) {
    expected = STATUS_LEN;
  } else {
    throw new DecodeError("UnknownFrameType", "frame type " + type);
  }
  if (bytes.length < expected) {
    throw new DecodeError("Truncated", bytes.length + " bytes, frame needs " + expected);
  }
  if (bytes.length > expected) {
    throw new DecodeError("BadLength", bytes.length + " bytes, header implies " + expected);
  }
  computed = crc16(bytes, expected - 2);
  received = u16(bytes, expected - 2);
  if (computed !== received) {
    throw new DecodeError("BadCrc", "computed 0x" + computed.toString(16) + ", frame carries 0x" + received.toString(16));
  }
  return type;
}

function decodeFull(bytes) {
  var flags = flagsOf(bytes);
  var cz = bytes[7];
  var nb = cz & 0x07;
  var zone = (cz >> 3) & 0x07;
  var bearings = [];
  var rd, b, k, s, a, h, det, defects, pad;
  if (cz & 0xC0) {
    throw new DecodeError("ReservedBits", "reserved bits set in byte 7");
  }
  if (zone > 4) {
    throw new DecodeError("InvalidField", "iso_zone code " + zone);
  }
  rd = new BitReader(bytes, FULL_HEADER_LEN);
  for (b = 0; b < nb; b++) {
    defects = [];
    for (k = 0; k < 4; k++) {
      s = rd.take(6);
      a = rd.take(8);
      h = rd.take(4);
      det = rd.take(1) === 1;
      if (h > 10) {
        throw new DecodeError("InvalidField", "harmonics code " + h);
      }
      defects.push({ score_db: score(s), amplitude_1x_g: amplitude(a), harmonics: h, detected: det });
    }
    bearings.push({ defects: defects });
  }
  pad = (bytes.length - 2 - FULL_HEADER_LEN) * 8 - nb * 4 * DEFECT_BITS;
  if (pad > 0 && rd.take(pad) !== 0) {
    throw new DecodeError("ReservedBits", "padding bits set in byte " + (bytes.length - 3));
  }
  return {
    frame: "full",
    version: ENVORD_VERSION,
    node_id: u16(bytes, 1),
    seq: u16(bytes, 3),
    flags: flags,
    speed_rpm: linear(u16(bytes, 8), 0.25, 0xFFFF),
    overall: {
      accel_rms_g: linear(u16(bytes, 10), 0.001, 0xFFFF),
      peak_g: linear(u16(bytes, 12), 0.01, 0xFFFF),
      crest_factor: linear(bytes[14], 0.1, 0xFF),
      kurtosis: linear(bytes[15], 0.25, 0xFF),
      velocity_rms_mm_s: linear(u16(bytes, 16), 0.01, 0xFFFF),
      iso_zone: ISO_ZONES[zone]
    },
    bearings: bearings
  };
}

function decodeReduced(bytes) {
  var flags = flagsOf(bytes);
  var b7 = bytes[7];
  var b8 = bytes[8];
  var present = (b7 & 0x80) !== 0;
  if ((b7 & 0x03) || (!present && b7 !== 0)) {
    throw new DecodeError("ReservedBits", "reserved bits set in byte 7");
  }
  if ((b8 & 0x03) || (!present && b8 !== 0)) {
    throw new DecodeError("ReservedBits", "reserved bits set in byte 8");
  }
  return {
    frame: "reduced",
    version: ENVORD_VERSION,
    node_id: u16(bytes, 1),
    seq: u16(bytes, 3),
    flags: flags,
    worst: present ? {
      bearing: (b7 >> 5) & 3,
      kind: DEFECT_KINDS[(b7 >> 3) & 3],
      score_db: score(b8 >> 2),
      detected: (b7 & 0x04) !== 0
    } : null
  };
}

function decodeStatus(bytes) {
  var flags = flagsOf(bytes);
  var state = bytes[7];
  var source = state & 0x03;
  var boot = (state >> 2) & 0x03;
  var last = DOWNLINK_RESULTS[bytes[12]];
  var survey = SURVEY_STATES[bytes[14]];
  var lo = f32(bytes, 15);
  var hi = f32(bytes, 19);
  var k = (bytes[23] << 8) | bytes[24];
  if (state & 0xE0) {
    throw new DecodeError("ReservedBits", "reserved bits set in byte 7");
  }
  if (source > 2) {
    throw new DecodeError("InvalidField", "band_source code " + source);
  }
  if (boot > 2) {
    throw new DecodeError("InvalidField", "boot_config code " + boot);
  }
  if (last === undefined) {
    throw new DecodeError("InvalidField", "last_downlink code " + bytes[12]);
  }
  if (survey === undefined) {
    throw new DecodeError("InvalidField", "survey code " + bytes[14]);
  }
  if (!(isFinite(lo) && isFinite(hi) && lo > 0 && hi > lo)) {
    throw new DecodeError("InvalidField", "band_hz " + lo + ", " + hi);
  }
  if (k >= 0x8000) { k -= 0x10000; }
  return {
    frame: "status",
    version: ENVORD_VERSION,
    node_id: u16(bytes, 1),
    seq: u16(bytes, 3),
    flags: flags,
    band_source: BAND_SOURCES[source],
    boot_config: BOOT_CONFIGS[boot],
    provisioned: (state & 0x10) !== 0,
    downlink_counter: u32(bytes, 8),
    last_downlink: last,
    refused_downlinks: bytes[13],
    survey: survey,
    band_hz: [lo, hi],
    band_kurtosis: k === -32768 ? null : k / 100
  };
}

/**
 * TS013 uplink decoder.
 * @param {{bytes: number[], fPort: number, recvTime?: Date}} input
 * @returns {{data?: object, errors: string[], warnings: string[]}}
 */
function decodeUplink(input) {
  var bytes = input && input.bytes;
  var i, type, data;
  if (!bytes || typeof bytes.length !== "number") {
    return { errors: ["BadInput: input.bytes missing"], warnings: [] };
  }
  for (i = 0; i < bytes.length; i++) {
    if (typeof bytes[i] !== "number" || bytes[i] < 0 || bytes[i] > 255 || bytes[i] % 1 !== 0) {
      return { errors: ["BadInput: input.bytes[" + i + "] is not a byte"], warnings: [] };
    }
  }
  if (typeof input.fPort === "number" && (input.fPort < 1 || input.fPort > 223)) {
    return { errors: ["BadInput: fPort " + input.fPort + " is not an application port (1..223)"], warnings: [] };
  }
  try {
    type = checkEnvelope(bytes);
    data = type === 0 ? decodeFull(bytes) : type === 1 ? decodeReduced(bytes) : decodeStatus(bytes);
  } catch (e) {
    if (e instanceof DecodeError) {
      return { errors: [e.message], warnings: [] };
    }
    throw e;
  }
  var warnings = [];
  if (data.flags.sensor_fault) { warnings.push("sensor fault flagged by the node"); }
  if (data.flags.low_battery) { warnings.push("low battery flagged by the node"); }
  if (type === 2 && data.last_downlink !== "none" && bytes[12] >= 16) {
    warnings.push("the node refused its last downlink: " + data.last_downlink);
  }
  return { data: data, errors: [], warnings: warnings };
}

if (typeof module !== "undefined" && module.exports) {
  module.exports = { decodeUplink: decodeUplink, crc16: crc16, fullFrameLen: fullFrameLen, f32: f32 };
}
