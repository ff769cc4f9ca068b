//! The C ABI between the host and dynamically loaded plugins.
//!
//! Rust has no stable ABI, so no trait object, `String` or `Vec` crosses the boundary. A plugin
//! exports one `extern "C"` symbol, [`ENTRY_SYMBOL`], returning a pointer to a `#[repr(C)]`
//! [`PluginDescriptor`]. The host reads `abi_major` and `abi_minor` before anything else and
//! refuses a plugin built for another major version.
//!
//! Data crossing the boundary:
//! - parameters, criteria and test description as UTF-8 JSON ([`BpStr`], borrowed for the call);
//! - the dose arrays of the datasets as one flat `f64` buffer, borrowed for the call; in the JSON
//!   each array is replaced by `{"$f64": [offset, length]}` into that buffer;
//! - the result (or an error message) as UTF-8 JSON in a [`BpBuf`] that the plugin allocated
//!   and that the host must hand back through `free_buf`, because the two sides may use
//!   different allocators.
//!
//! Panics never cross: the plugin side catches them and returns [`STATUS_PANIC`] with the panic
//! message. Use [`export_plugin!`](crate::export_plugin) instead of writing the entry by hand.

use std::panic::{AssertUnwindSafe, catch_unwind};

use serde_json::{Map, Value};

use crate::contract::{Analysis, AnalysisInput, PluginManifest};
use crate::outcome::AnalysisOutput;

/// Major ABI version: a plugin with another major version is refused.
pub const ABI_MAJOR: u32 = 1;
/// Minor ABI version: fields appended to [`PluginDescriptor`] or optional fields added to the
/// wire JSON raise it; older minors still load. 1.1 added `AnalysisInput::mu`; 1.2 added
/// `AnalysisInput::film` and `AnalysisOutput::derived_measured` and `calibration`; 1.3 added
/// `PluginManifest::judged_metrics`.
pub const ABI_MINOR: u32 = 3;
/// Name of the exported entry function. The major version is part of the name, so a plugin
/// built for another major version fails at symbol lookup even before the handshake.
pub const ENTRY_SYMBOL: &str = "beamproof_plugin_entry_v1";

/// The call succeeded; the buffer holds JSON.
pub const STATUS_OK: i32 = 0;
/// The analysis reported an error; the buffer holds the message.
pub const STATUS_ERROR: i32 = 1;
/// The plugin panicked; the buffer holds the panic message.
pub const STATUS_PANIC: i32 = 2;
/// The input could not be decoded by the plugin; the buffer holds the reason.
pub const STATUS_BAD_INPUT: i32 = 3;

/// Borrowed UTF-8 bytes, valid for the duration of one call.
#[repr(C)]
#[derive(Debug, Clone, Copy)]
pub struct BpStr {
    pub ptr: *const u8,
    pub len: usize,
}

impl BpStr {
    /// Borrow a string slice for one call.
    pub fn borrow(s: &str) -> BpStr {
        BpStr {
            ptr: s.as_ptr(),
            len: s.len(),
        }
    }
}

/// Bytes owned by the plugin that produced them; release with the descriptor's `free_buf`.
#[repr(C)]
#[derive(Debug)]
pub struct BpBuf {
    pub ptr: *mut u8,
    pub len: usize,
    pub cap: usize,
}

impl BpBuf {
    /// An empty buffer, for the host to pass as an out-parameter.
    pub const fn empty() -> BpBuf {
        BpBuf {
            ptr: std::ptr::null_mut(),
            len: 0,
            cap: 0,
        }
    }

    fn from_vec(v: Vec<u8>) -> BpBuf {
        let mut v = std::mem::ManuallyDrop::new(v);
        BpBuf {
            ptr: v.as_mut_ptr(),
            len: v.len(),
            cap: v.capacity(),
        }
    }
}

/// The versioned table a plugin exports. Fields are only ever appended (raising [`ABI_MINOR`]);
/// `struct_size` tells the host which fields exist.
#[repr(C)]
pub struct PluginDescriptor {
    pub abi_major: u32,
    pub abi_minor: u32,
    pub struct_size: u32,
    /// Writes the [`PluginManifest`] as JSON into `out`.
    pub manifest: unsafe extern "C" fn(out: *mut BpBuf) -> i32,
    /// Runs the analysis on wire-encoded input; writes output JSON or a message into `out`.
    pub analyse: unsafe extern "C" fn(
        input_json: BpStr,
        samples: *const f64,
        n_samples: usize,
        out: *mut BpBuf,
    ) -> i32,
    /// Frees a buffer this plugin returned.
    pub free_buf: unsafe extern "C" fn(buf: BpBuf),
}

impl PluginDescriptor {
    /// A descriptor for the current ABI, used by [`export_plugin!`](crate::export_plugin).
    pub const fn new(
        manifest: unsafe extern "C" fn(out: *mut BpBuf) -> i32,
        analyse: unsafe extern "C" fn(BpStr, *const f64, usize, *mut BpBuf) -> i32,
    ) -> PluginDescriptor {
        PluginDescriptor {
            abi_major: ABI_MAJOR,
            abi_minor: ABI_MINOR,
            struct_size: std::mem::size_of::<PluginDescriptor>() as u32,
            manifest,
            analyse,
            free_buf,
        }
    }
}

/// Releases a buffer allocated by this side's allocator.
///
/// # Safety
/// `buf` must come from this module's `BpBuf::from_vec` in the same binary, and be freed once.
pub unsafe extern "C" fn free_buf(buf: BpBuf) {
    if !buf.ptr.is_null() {
        // SAFETY: ptr, len and cap come from a Vec<u8> leaked by `BpBuf::from_vec`.
        drop(unsafe { Vec::from_raw_parts(buf.ptr, buf.len, buf.cap) });
    }
}

// ---------------------------------------------------------------------------------------------
// Wire encoding of the input: JSON with the dataset arrays moved into one f64 buffer.

const BUF_KEY: &str = "$f64";

/// Encode an input for the boundary: JSON text plus the flat sample buffer.
pub fn encode_input(input: &AnalysisInput) -> Result<(String, Vec<f64>), String> {
    let mut value = serde_json::to_value(input).map_err(|e| e.to_string())?;
    let mut samples = Vec::new();
    if let Value::Object(obj) = &mut value {
        for role in ["measured", "calculated"] {
            if let Some(Value::Object(ds)) = obj.get_mut(role)
                && let Some(data) = ds.get_mut("data")
            {
                move_arrays_out(data, &mut samples);
            }
        }
    }
    let json = serde_json::to_string(&value).map_err(|e| e.to_string())?;
    Ok((json, samples))
}

/// Decode an input received across the boundary.
pub fn decode_input(json: &str, samples: &[f64]) -> Result<AnalysisInput, String> {
    let mut value: Value = serde_json::from_str(json).map_err(|e| e.to_string())?;
    move_arrays_in(&mut value, samples)?;
    serde_json::from_value(value).map_err(|e| e.to_string())
}

fn move_arrays_out(v: &mut Value, samples: &mut Vec<f64>) {
    match v {
        Value::Array(items) if !items.is_empty() && items.iter().all(Value::is_number) => {
            let offset = samples.len();
            samples.extend(items.iter().filter_map(Value::as_f64));
            let mut m = Map::new();
            m.insert(
                BUF_KEY.to_string(),
                Value::from(vec![offset as u64, items.len() as u64]),
            );
            *v = Value::Object(m);
        }
        Value::Array(items) => items.iter_mut().for_each(|i| move_arrays_out(i, samples)),
        Value::Object(m) => m.values_mut().for_each(|i| move_arrays_out(i, samples)),
        _ => {}
    }
}

fn move_arrays_in(v: &mut Value, samples: &[f64]) -> Result<(), String> {
    match v {
        Value::Object(m) if m.len() == 1 && m.contains_key(BUF_KEY) => {
            let range = m
                .get(BUF_KEY)
                .and_then(Value::as_array)
                .filter(|a| a.len() == 2)
                .and_then(|a| Some((a[0].as_u64()? as usize, a[1].as_u64()? as usize)))
                .ok_or("malformed sample reference")?;
            let slice = samples
                .get(range.0..range.0.saturating_add(range.1))
                .ok_or("sample reference outside the buffer")?;
            *v = Value::Array(
                slice
                    .iter()
                    .map(|&x| {
                        serde_json::Number::from_f64(x)
                            .map(Value::Number)
                            .ok_or_else(|| format!("sample value {x} is not finite"))
                    })
                    .collect::<Result<_, _>>()?,
            );
            Ok(())
        }
        Value::Array(items) => items
            .iter_mut()
            .try_for_each(|i| move_arrays_in(i, samples)),
        Value::Object(m) => m.values_mut().try_for_each(|i| move_arrays_in(i, samples)),
        _ => Ok(()),
    }
}

// ---------------------------------------------------------------------------------------------
// Plugin side.

fn panic_text(payload: &(dyn std::any::Any + Send)) -> String {
    payload
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "unknown panic payload".to_string())
}

fn quiet_panics() {
    // The plugin has its own copy of std and so its own panic hook. The host reports the caught
    // panic with its message, so the plugin's default hook would only print it twice.
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| std::panic::set_hook(Box::new(|_| {})));
}

/// Plugin side of `manifest`.
///
/// # Safety
/// `out` must be a valid pointer to a `BpBuf` the host owns. Only for dynamic plugins (it
/// silences the panic hook of the plugin's runtime).
pub unsafe fn serve_manifest(plugin: fn() -> &'static dyn Analysis, out: *mut BpBuf) -> i32 {
    quiet_panics();
    let result = catch_unwind(|| serde_json::to_vec(&plugin().manifest()));
    let (status, bytes) = match result {
        Ok(Ok(bytes)) => (STATUS_OK, bytes),
        Ok(Err(e)) => (STATUS_ERROR, e.to_string().into_bytes()),
        Err(p) => (STATUS_PANIC, panic_text(p.as_ref()).into_bytes()),
    };
    // SAFETY: the caller guarantees `out` is valid for writes.
    unsafe { out.write(BpBuf::from_vec(bytes)) };
    status
}

/// Plugin side of `analyse`.
///
/// # Safety
/// `input` must point to `len` valid UTF-8 bytes, `samples` to `n_samples` f64 (or be null with
/// `n_samples == 0`), both valid for the call; `out` must be valid for writes.
pub unsafe fn serve_analyse(
    plugin: fn() -> &'static dyn Analysis,
    input: BpStr,
    samples: *const f64,
    n_samples: usize,
    out: *mut BpBuf,
) -> i32 {
    quiet_panics();
    // SAFETY: guaranteed by the caller for the duration of this call.
    let json = unsafe { std::slice::from_raw_parts(input.ptr, input.len) };
    let samples: &[f64] = if n_samples == 0 || samples.is_null() {
        &[]
    } else {
        // SAFETY: guaranteed by the caller for the duration of this call.
        unsafe { std::slice::from_raw_parts(samples, n_samples) }
    };
    let result = catch_unwind(AssertUnwindSafe(|| {
        let json = std::str::from_utf8(json).map_err(|e| (STATUS_BAD_INPUT, e.to_string()))?;
        let input = decode_input(json, samples).map_err(|e| (STATUS_BAD_INPUT, e))?;
        let output = plugin()
            .analyse(&input)
            .map_err(|e| (STATUS_ERROR, e.message))?;
        serde_json::to_vec(&output).map_err(|e| (STATUS_ERROR, e.to_string()))
    }));
    let (status, bytes) = match result {
        Ok(Ok(bytes)) => (STATUS_OK, bytes),
        Ok(Err((status, msg))) => (status, msg.into_bytes()),
        Err(p) => (STATUS_PANIC, panic_text(p.as_ref()).into_bytes()),
    };
    // SAFETY: the caller guarantees `out` is valid for writes.
    unsafe { out.write(BpBuf::from_vec(bytes)) };
    status
}

/// Export an [`Analysis`] as a dynamic plugin: `beamproof_api::export_plugin!(MyAnalysis);`
/// in a crate built as `cdylib`. The expression is evaluated once, on first use.
#[macro_export]
macro_rules! export_plugin {
    ($ctor:expr) => {
        fn __beamproof_plugin() -> &'static dyn $crate::Analysis {
            static PLUGIN: ::std::sync::OnceLock<::std::boxed::Box<dyn $crate::Analysis>> =
                ::std::sync::OnceLock::new();
            PLUGIN
                .get_or_init(|| ::std::boxed::Box::new($ctor))
                .as_ref()
        }
        unsafe extern "C" fn __beamproof_manifest(out: *mut $crate::abi::BpBuf) -> i32 {
            // SAFETY: forwarded from the host, which upholds the ABI contract.
            unsafe { $crate::abi::serve_manifest(__beamproof_plugin, out) }
        }
        unsafe extern "C" fn __beamproof_analyse(
            input: $crate::abi::BpStr,
            samples: *const f64,
            n_samples: usize,
            out: *mut $crate::abi::BpBuf,
        ) -> i32 {
            // SAFETY: forwarded from the host, which upholds the ABI contract.
            unsafe {
                $crate::abi::serve_analyse(__beamproof_plugin, input, samples, n_samples, out)
            }
        }
        static __BEAMPROOF_DESCRIPTOR: $crate::abi::PluginDescriptor =
            $crate::abi::PluginDescriptor::new(__beamproof_manifest, __beamproof_analyse);
        /// Entry point of the beamproof plugin ABI, version 1.
        #[unsafe(no_mangle)]
        pub extern "C" fn beamproof_plugin_entry_v1() -> *const $crate::abi::PluginDescriptor {
            &__BEAMPROOF_DESCRIPTOR
        }
    };
}

// ---------------------------------------------------------------------------------------------
// Host side.

/// A failed call into a plugin, as the host reports it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum CallError {
    /// The analysis returned an error.
    Analysis(String),
    /// The plugin panicked; the panic was caught inside the plugin.
    Panic(String),
    /// The plugin or host could not decode what the other sent.
    Protocol(String),
}

impl std::fmt::Display for CallError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            CallError::Analysis(m) => write!(f, "{m}"),
            CallError::Panic(m) => write!(f, "plugin panicked: {m}"),
            CallError::Protocol(m) => write!(f, "plugin protocol error: {m}"),
        }
    }
}

/// Take a plugin buffer's bytes and hand the buffer back to the plugin.
///
/// # Safety
/// `buf` must have been produced by `desc`'s plugin and not freed.
unsafe fn take_buf(desc: &PluginDescriptor, buf: BpBuf) -> Vec<u8> {
    let bytes = if buf.ptr.is_null() {
        Vec::new()
    } else {
        // SAFETY: the plugin wrote `len` initialised bytes at `ptr`.
        unsafe { std::slice::from_raw_parts(buf.ptr, buf.len) }.to_vec()
    };
    // SAFETY: returned to the allocator that made it, once.
    unsafe { (desc.free_buf)(buf) };
    bytes
}

fn status_result(status: i32, bytes: Vec<u8>) -> Result<Vec<u8>, CallError> {
    let text = || String::from_utf8_lossy(&bytes).into_owned();
    match status {
        STATUS_OK => Ok(bytes),
        STATUS_ERROR => Err(CallError::Analysis(text())),
        STATUS_PANIC => Err(CallError::Panic(text())),
        STATUS_BAD_INPUT => Err(CallError::Protocol(text())),
        other => Err(CallError::Protocol(format!(
            "unknown status {other}: {}",
            text()
        ))),
    }
}

/// Ask a loaded plugin for its manifest.
///
/// # Safety
/// `desc` must be a descriptor of a still-loaded plugin whose ABI version was checked.
pub unsafe fn call_manifest(desc: &PluginDescriptor) -> Result<PluginManifest, CallError> {
    let mut out = BpBuf::empty();
    // SAFETY: `out` is a valid out-parameter; the plugin is loaded.
    let status = unsafe { (desc.manifest)(&mut out) };
    // SAFETY: the plugin filled `out`.
    let bytes = status_result(status, unsafe { take_buf(desc, out) })?;
    serde_json::from_slice(&bytes).map_err(|e| CallError::Protocol(format!("manifest: {e}")))
}

/// Run a loaded plugin's analysis.
///
/// # Safety
/// `desc` must be a descriptor of a still-loaded plugin whose ABI version was checked.
pub unsafe fn call_analyse(
    desc: &PluginDescriptor,
    input: &AnalysisInput,
) -> Result<AnalysisOutput, CallError> {
    let (json, samples) = encode_input(input).map_err(CallError::Protocol)?;
    let mut out = BpBuf::empty();
    // SAFETY: json and samples outlive the call; `out` is a valid out-parameter.
    let status = unsafe {
        (desc.analyse)(
            BpStr::borrow(&json),
            samples.as_ptr(),
            samples.len(),
            &mut out,
        )
    };
    // SAFETY: the plugin filled `out`.
    let bytes = status_result(status, unsafe { take_buf(desc, out) })?;
    serde_json::from_slice(&bytes).map_err(|e| CallError::Protocol(format!("result: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::contract::*;
    use crate::data::*;
    use std::collections::BTreeMap;

    fn sample_input() -> AnalysisInput {
        AnalysisInput {
            test: TestInfo {
                site: "s".into(),
                id: "t".into(),
                name: "T".into(),
                kind: TestKind::PointDose,
                machine: "m".into(),
                beam: None,
            },
            params: BTreeMap::from([("a".to_string(), serde_json::json!(1.5))]),
            criteria: CriteriaSet {
                name: "c".into(),
                dose_difference_percent: Some(Levels {
                    tolerance: 2.0,
                    action: 3.0,
                }),
                gamma: vec![],
                metrics: BTreeMap::new(),
            },
            measured: Some(Dataset {
                source: "m.csv".into(),
                unit: DoseUnit::Gy,
                data: DatasetData::Points(PointSet {
                    labels: vec!["p1".into(), "p2".into()],
                    x_mm: vec![0.1, -3.0],
                    y_mm: vec![0.0, 1.0 / 3.0],
                    z_mm: vec![5.0, 6.0],
                    dose: vec![2.0, 1.999_999_999_999],
                }),
            }),
            calculated: Some(Dataset {
                source: "c.dcm".into(),
                unit: DoseUnit::Gy,
                data: DatasetData::Grid(Grid {
                    x_mm: vec![0.0, 1.0],
                    y_mm: vec![0.0],
                    z_mm: vec![0.0],
                    dose: vec![1.0, 2.0],
                }),
            }),
            mu: None,
            film: None,
        }
    }

    #[test]
    fn wire_encoding_round_trips_bit_for_bit() {
        let input = sample_input();
        let (json, samples) = encode_input(&input).expect("encode");
        assert!(
            !json.contains("1.999999"),
            "arrays must travel in the buffer"
        );
        assert_eq!(samples.len(), 2 * 4 + 2 + 1 + 1 + 2);
        let back = decode_input(&json, &samples).expect("decode");
        assert_eq!(back, input);
    }

    #[test]
    fn decoding_rejects_references_past_the_buffer() {
        let (json, samples) = encode_input(&sample_input()).expect("encode");
        let err = decode_input(&json, &samples[..3]).expect_err("short buffer");
        assert!(err.contains("outside the buffer"), "{err}");
    }
}
