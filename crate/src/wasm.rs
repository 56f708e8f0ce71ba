//! The browser face: wasm-bindgen exports taking file bytes and settings JSON, returning plain JS
//! objects whose large fields are Uint8Arrays (the worker transfers their buffers). Every error
//! comes back as a JS exception carrying the core's one-sentence message; nothing here panics.

use crate::codec::{self, DecodeLimits, OutputFormat};
use crate::planes::Image;
use crate::{metrics, pipeline, preview, Error, Progress, Settings};
use js_sys::{Function, Object, Reflect, Uint8Array};
use wasm_bindgen::prelude::*;

fn js_err(e: Error) -> JsError {
    JsError::new(&e.to_string())
}

fn set(obj: &Object, key: &str, value: &JsValue) -> Result<(), JsError> {
    Reflect::set(obj, &JsValue::from_str(key), value).map(|_| ()).map_err(|_| JsError::new("could not build the result object"))
}

fn bytes(v: &[u8]) -> JsValue {
    Uint8Array::from(v).into()
}

/// Reports progress through a JS callback (fraction, stage). Cancelling is done by terminating
/// the worker, so `is_cancelled` is always false here.
struct JsProgress<'a>(&'a Function);

// wasm32 without threads runs on one thread; the Sync bound exists for the native tile pool.
unsafe impl Sync for JsProgress<'_> {}

impl Progress for JsProgress<'_> {
    fn report(&self, fraction: f32, stage: &str) {
        let _ = self.0.call2(&JsValue::NULL, &JsValue::from_f64(f64::from(fraction)), &JsValue::from_str(stage));
    }
    fn is_cancelled(&self) -> bool {
        false
    }
}

fn decode(input: &[u8], max_megapixels: u32) -> Result<Image, JsError> {
    let limits = DecodeLimits { max_megapixels: u64::from(max_megapixels), ..DecodeLimits::default() };
    codec::decode(input, &limits).map_err(js_err)
}

#[wasm_bindgen(start)]
pub fn start() {
    console_error_panic_hook::set_once();
}

/// The default settings as JSON (the page's starting point for a new pane).
#[wasm_bindgen(js_name = defaultSettings)]
pub fn default_settings() -> String {
    Settings::default().to_json()
}

/// Checks settings JSON; returns it normalised (all fields present) or throws the reason.
#[wasm_bindgen(js_name = checkSettings)]
pub fn check_settings(json: &str) -> Result<String, JsError> {
    Settings::from_json(json).map(|s| s.to_json()).map_err(js_err)
}

/// Size, depth, channels, noise estimates and an RGBA preview of an image file.
#[wasm_bindgen]
pub fn open(input: &[u8], max_megapixels: u32) -> Result<JsValue, JsError> {
    let img = decode(input, max_megapixels)?;
    let est = pipeline::estimate_noise(&img);
    let obj = Object::new();
    set(&obj, "width", &JsValue::from_f64(img.width as f64))?;
    set(&obj, "height", &JsValue::from_f64(img.height as f64))?;
    set(&obj, "channels", &JsValue::from_f64(img.stored_channels() as f64))?;
    set(&obj, "bitDepth", &JsValue::from_f64(f64::from(img.depth.bits())))?;
    set(&obj, "sigma", &JsValue::from_f64(pipeline::blind_sigma(&est)))?;
    set(&obj, "rgba", &bytes(&preview::rgba8(&img)))?;
    Ok(obj.into())
}

/// One run: the result as PNG at the input's depth, RGBA views (result, residual, cut map) and
/// the run report as JSON.
#[wasm_bindgen]
pub fn denoise(input: &[u8], settings_json: &str, max_megapixels: u32, on_progress: &Function) -> Result<JsValue, JsError> {
    let settings = Settings::from_json(settings_json).map_err(js_err)?;
    let img = decode(input, max_megapixels)?;
    let run = pipeline::denoise(&img, &settings, &JsProgress(on_progress)).map_err(js_err)?;
    let png = codec::encode(&run.image, OutputFormat::Png).map_err(js_err)?;
    let obj = Object::new();
    set(&obj, "png", &bytes(&png))?;
    set(&obj, "rgba", &bytes(&preview::rgba8(&run.image)))?;
    set(&obj, "residual", &bytes(&preview::residual_rgba8(&img, &run.image, run.report.sigma_used)))?;
    if let Some(map) = &run.cut_map {
        set(&obj, "cuts", &bytes(&preview::unit_plane_rgba8(map)))?;
    }
    let report = serde_json::to_string(&run.report).map_err(|e| JsError::new(&e.to_string()))?;
    set(&obj, "report", &JsValue::from_str(&report))?;
    Ok(obj.into())
}

/// PSNR and SSIM of `test` against `clean` (both file bytes) as JSON.
#[wasm_bindgen]
pub fn compare(clean: &[u8], test: &[u8], max_megapixels: u32) -> Result<String, JsError> {
    let a = decode(clean, max_megapixels)?;
    let b = decode(test, max_megapixels)?;
    let q = metrics::compare(&a, &b).map_err(js_err)?;
    serde_json::to_string(&q).map_err(|e| JsError::new(&e.to_string()))
}

/// The patch group of the reference covering pixel (x, y), as JSON {positions, similarity, patch}.
#[wasm_bindgen(js_name = groupAt)]
pub fn group_at(input: &[u8], settings_json: &str, x: u32, y: u32, max_megapixels: u32) -> Result<String, JsError> {
    let settings = Settings::from_json(settings_json).map_err(js_err)?;
    let img = decode(input, max_megapixels)?;
    let (g, patch) = pipeline::group_at(&img, &settings, x as usize, y as usize).map_err(js_err)?;
    let v = serde_json::json!({"positions": g.positions, "similarity": g.similarity, "patch": patch});
    Ok(v.to_string())
}
