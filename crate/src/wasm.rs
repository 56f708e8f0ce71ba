//! The browser face: wasm-bindgen exports taking file bytes and settings as a plain object
//! (serde-wasm-bindgen, read as a settings file is), returning plain JS objects: reports, fits and
//! plans through serde-wasm-bindgen, large fields as typed arrays made directly (the worker
//! transfers their buffers). Every error comes back as a JS exception carrying the core's
//! one-sentence message; nothing here panics.

use crate::file::{self, DecodeLimits, Document, Format, Provenance};
use crate::methods::bands::{self, Band};
use crate::methods::patch_graph::{matching_guide, Stage};
use crate::methods::MethodOutput;
use crate::noise::spectrum::NoiseSpectrum;
use crate::patch::aggregate::Accumulator;
use crate::pipeline::RunOutput;
use crate::planes::{Image, Plane};
use crate::run_file::StackImage;
use crate::{metrics, pipeline, preview, removed_detail, Error, Progress, Settings};
use js_sys::{Array, Float32Array, Float64Array, Function, Object, Reflect, Uint8Array};
use wasm_bindgen::prelude::*;
use wasm_bindgen::JsCast;

/// The core's error as the JS exception (its message is the error's sentence).
fn js_err(e: Error) -> JsError {
    JsError::from(e)
}

/// A message between page and worker that does not fit (our fault, not the user's): the core's
/// internal error, so every error crossing the boundary is one of the core's.
fn internal(message: impl Into<String>) -> JsError {
    js_err(Error::Internal(message.into()))
}

/// Settings from the page: a plain object, read as a settings file is (version 1 upgraded,
/// every range checked).
fn settings_in(v: JsValue) -> Result<Settings, JsError> {
    let value: serde_json::Value = serde_wasm_bindgen::from_value(v)
        .map_err(|e| js_err(Error::BadSettings(format!("the settings are not valid: {e}"))))?;
    Settings::from_value(value).map_err(js_err)
}

/// A core value as a plain JS object, as its JSON would read (maps as objects, None as null).
fn to_js<T: serde::Serialize + ?Sized>(v: &T) -> Result<JsValue, JsError> {
    v.serialize(&serde_wasm_bindgen::Serializer::json_compatible()).map_err(|e| internal(e.to_string()))
}

/// A value the page sent back as it was given (a band plan, spectra).
fn from_js<T: serde::de::DeserializeOwned>(v: JsValue, what: &str) -> Result<T, JsError> {
    serde_wasm_bindgen::from_value(v).map_err(|_| internal(format!("{what} sent to the worker is not valid")))
}

fn set(obj: &Object, key: &str, value: &JsValue) -> Result<(), JsError> {
    Reflect::set(obj, &JsValue::from_str(key), value)
        .map(|_| ())
        .map_err(|_| internal("could not build the result object"))
}

fn bytes(v: &[u8]) -> JsValue {
    Uint8Array::from(v).into()
}

fn num(v: usize) -> JsValue {
    JsValue::from_f64(v as f64)
}

/// One Float32Array per plane: whole images cross the boundary a plane at a time, each copied
/// once, never gathered into one more array.
fn plane_arrays(planes: &[Plane]) -> Array {
    planes.iter().map(|p| JsValue::from(Float32Array::from(p.data.as_slice()))).collect()
}

/// The planes back from JS: each array must hold `width` x `height` values.
fn planes_from(arrays: &Array, width: usize, height: usize) -> Result<Vec<Plane>, JsError> {
    arrays
        .iter()
        .map(|a| {
            let a: Float32Array =
                a.dyn_into().map_err(|_| internal("a plane sent to the worker is not a Float32Array"))?;
            if a.length() as usize != width * height {
                return Err(internal("the planes sent to the worker do not match the image size"));
            }
            Ok(Plane { width, height, data: a.to_vec() })
        })
        .collect()
}

/// Splits an array of whole planes of `width` x `height`; the length must fit exactly.
fn unflatten(data: &[f32], width: usize, height: usize) -> Result<Vec<Plane>, JsError> {
    let n = width * height;
    if n == 0 || !data.len().is_multiple_of(n) || data.is_empty() {
        return Err(internal("the planes sent to the worker do not match the image size"));
    }
    Ok(data.chunks(n).map(|c| Plane { width, height, data: c.to_vec() }).collect())
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

fn decode_file(input: &[u8], max_megapixels: u32) -> Result<Document, JsError> {
    let limits = DecodeLimits { max_megapixels: u64::from(max_megapixels), ..DecodeLimits::default() };
    file::decode(input, &limits).map_err(js_err)
}

/// The first image of a file; the page sends a stack's images one at a time ([`unit_file`]).
fn decode(input: &[u8], max_megapixels: u32) -> Result<Image, JsError> {
    decode_file(input, max_megapixels)?.unit(0).map_err(js_err)
}

/// A run's result as a file: the input's format (PNG for JPEG and BMP), its metadata, and the
/// program and settings recorded.
fn result_file(
    input: &[u8],
    max_megapixels: u32,
    result: &Image,
    settings: &Settings,
) -> Result<(Vec<u8>, Format), JsError> {
    let doc = decode_file(input, max_megapixels)?;
    let mut out = doc.unit_document(0).map_err(js_err)?;
    out.set_unit(0, result.clone()).map_err(js_err)?;
    let format = doc.result_format();
    let provenance = Provenance::of(settings);
    Ok((file::encode(&out, format, Some(&provenance)).map_err(js_err)?, format))
}

/// Largest image whose removed-detail map the page draws (7 f32 planes: 450 MB at 16 MP).
const DETAIL_MAP_MAX_PIXELS: usize = 16_000_000;

/// Runs when the module loads: a panic, should one happen, reaches the console with its message.
#[wasm_bindgen(start)]
pub fn start() {
    console_error_panic_hook::set_once();
}

/// The default settings, as an object (the page's starting point for a new pane).
#[wasm_bindgen(js_name = defaultSettings)]
pub fn default_settings() -> Result<JsValue, JsError> {
    to_js(&Settings::default())
}

/// The methods (name, label, help, whether split into bands, page limit; `methods::METHODS`),
/// as an array of plain objects: the page builds its method list from it.
#[wasm_bindgen(js_name = methods)]
pub fn methods() -> Result<JsValue, JsError> {
    to_js(crate::methods::METHODS)
}

/// The table of every numeric setting (key, label, range, step, help; `setting_fields::FIELDS`),
/// as an array of plain objects: the page builds its fields' limits and help from it.
#[wasm_bindgen(js_name = settingFields)]
pub fn setting_fields() -> Result<JsValue, JsError> {
    to_js(crate::setting_fields::FIELDS)
}

/// The table of every choice setting (key, label, method, options as [value, label], help;
/// `setting_fields::CHOICES`): the page builds its lists from it.
#[wasm_bindgen(js_name = settingChoices)]
pub fn setting_choices() -> Result<JsValue, JsError> {
    to_js(crate::setting_fields::CHOICES)
}

/// The page's size limit in megapixels (the core's default, as the CLI's).
#[wasm_bindgen(js_name = maxMegapixels)]
pub fn max_megapixels() -> u32 {
    u32::try_from(file::DEFAULT_MAX_MEGAPIXELS).unwrap_or(u32::MAX)
}

/// How the page runs one image of a file of `pages` pages under these settings, as the core
/// decides: `volume` (a slice of its stack, [`stack_around`]) and `bands` (split into bands of
/// rows across the workers, the method table's `splits_into_bands`; else one worker).
#[wasm_bindgen(js_name = runPlan)]
pub fn run_plan(settings: JsValue, pages: u32) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let plan = RunPlan {
        volume: crate::stack::applies(&settings, pages as usize),
        bands: settings.method.info().splits_into_bands,
    };
    to_js(&plan)
}

#[derive(serde::Serialize)]
struct RunPlan {
    volume: bool,
    bands: bool,
}

/// Checks settings (an object, as a settings file reads); returns them normalised (all fields
/// present) or throws the reason.
#[wasm_bindgen(js_name = checkSettings)]
pub fn check_settings(settings: JsValue) -> Result<JsValue, JsError> {
    to_js(&settings_in(settings)?)
}

/// Size, depth, channels, noise estimates and an RGBA preview of an image file.
#[wasm_bindgen]
pub fn open(input: &[u8], max_megapixels: u32) -> Result<JsValue, JsError> {
    let doc = decode_file(input, max_megapixels)?;
    let img = doc.unit(0).map_err(js_err)?;
    let est = pipeline::estimate_noise(&img);
    let obj = Object::new();
    let summary = doc.summary();
    set(&obj, "units", &num(summary.units))?;
    set(&obj, "pages", &num(summary.pages))?;
    let labels: Array = (0..summary.units).map(|k| JsValue::from_str(&doc.unit_label(k))).collect();
    set(&obj, "unitLabels", &labels.into())?;
    set(&obj, "format", &JsValue::from_str(doc.format.info().name))?;
    set(&obj, "sample", &JsValue::from_str(doc.sample.describe()))?;
    set(&obj, "resultExtension", &JsValue::from_str(doc.result_format().extension()))?;
    set(&obj, "blankPixels", &num(summary.blank_pixels))?;
    // Sigma in the file's own units (float data work on a scaled copy).
    set(&obj, "scale", &JsValue::from_f64(summary.map.scale))?;
    set(&obj, "width", &JsValue::from_f64(img.width as f64))?;
    set(&obj, "height", &JsValue::from_f64(img.height as f64))?;
    set(&obj, "channels", &JsValue::from_f64(img.stored_channels() as f64))?;
    set(&obj, "bitDepth", &JsValue::from_f64(f64::from(img.depth.bits())))?;
    set(&obj, "sigma", &JsValue::from_f64(pipeline::blind_sigma(&est)))?;
    set_view_size(&obj, &img)?;
    set(&obj, "rgba", &bytes(&preview::rgba8(&img, preview::factor(img.width, img.height))))?;
    Ok(obj.into())
}

/// The noise as `noise: "auto"` fits it, as an object: {model, sentence, fallback, channels (each with
/// its level function's points and line, and photon parameters when used), planes, spectra_8,
/// sigma (what a run with the noise fitted uses)}.
#[wasm_bindgen(js_name = fitNoise)]
pub fn fit_noise(input: &[u8], max_megapixels: u32) -> Result<JsValue, JsError> {
    let img = decode(input, max_megapixels)?;
    let fit = pipeline::fit_noise(&img, &Settings::default()).map_err(js_err)?;
    let v = serde_json::json!({
        "model": fit.report.model,
        "sentence": fit.report.sentence,
        "fallback": fit.report.fallback,
        "channels": fit.report.channels,
        "planes": fit.report.planes,
        // Each with its low/high ring ratio, the number the model choice reads.
        "spectra_8": fit.spectra_8.iter().map(|s| s.as_ref().map(|s| serde_json::json!({
            "k": s.k, "variances": s.variances, "ratio": s.colour_ratio(), "correlated": s.is_coloured()
        }))).collect::<Vec<_>>(),
        "bitDepth": img.depth.bits(),
        "sigma": fit.sigma,
    });
    to_js(&v)
}

/// The views' shrink factor and size (views of large images are smaller than the image).
fn set_view_size(obj: &Object, img: &Image) -> Result<usize, JsError> {
    let f = preview::factor(img.width, img.height);
    let (vw, vh) = preview::view_size(img.width, img.height, f);
    set(obj, "viewFactor", &num(f))?;
    set(obj, "viewWidth", &num(vw))?;
    set(obj, "viewHeight", &num(vh))?;
    Ok(f)
}

/// What the page gets from a finished run: the result file (full depth, the input's format and
/// metadata), views, report.
fn run_result(
    input: &[u8],
    max_megapixels: u32,
    settings: &Settings,
    img: &Image,
    run: &RunOutput,
) -> Result<JsValue, JsError> {
    let (result, format) = result_file(input, max_megapixels, &run.image, settings)?;
    let obj = Object::new();
    let f = set_view_size(&obj, img)?;
    set(&obj, "file", &bytes(&result))?;
    set(&obj, "extension", &JsValue::from_str(format.extension()))?;
    set(&obj, "rgba", &bytes(&preview::rgba8(&run.image, f)))?;
    let sigma = pipeline::residual_view_sigma(img, &run.report);
    set(&obj, "residual", &bytes(&preview::residual_rgba8(img, &run.image, sigma, f)))?;
    if let Some(map) = &run.cut_map {
        set(&obj, "cuts", &bytes(&preview::unit_plane_rgba8(map, f)))?;
    }
    // Where structure was removed: drawn up to DETAIL_MAP_MAX_PIXELS (it holds 7 planes of f32).
    if img.width * img.height <= DETAIL_MAP_MAX_PIXELS {
        let map = removed_detail::map(img, &run.image, run.report.noise.mean_level);
        set(&obj, "detail", &bytes(&preview::flagged_rgba8(&run.image, &map, removed_detail::FLAG, f)))?;
        set(&obj, "detailShare", &JsValue::from_f64(removed_detail::flagged_share(&map)))?;
    }
    set(&obj, "report", &to_js(&run.report)?)?;
    Ok(obj.into())
}

/// One run: the result as PNG at the input's depth, RGBA views (result, residual, cut map) and
/// the run report as JSON; with `estimate`, a second pass and the error estimate in the report.
#[wasm_bindgen]
pub fn denoise(
    input: &[u8],
    settings: JsValue,
    max_megapixels: u32,
    on_progress: &Function,
    estimate: bool,
) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let img = decode(input, max_megapixels)?;
    let pixels = img.width * img.height;
    let info = settings.method.info();
    if let Some(limit) = info.page_max_pixels.filter(|&l| pixels > l) {
        return Err(js_err(Error::BadSettings(format!(
            "this image is too large for the {} method in the page ({:.1} megapixels; at most {} fit in one \
             worker's memory): use the patch-graph method, or the command line",
            info.name,
            pixels as f64 / 1e6,
            limit / 1_000_000
        ))));
    }
    let progress = JsProgress(on_progress);
    let run = if estimate {
        pipeline::denoise_estimated(&img, &settings, &progress)
    } else {
        pipeline::denoise(&img, &settings, &progress)
    };
    run_result(input, max_megapixels, &settings, &img, &run.map_err(js_err)?)
}

/// Image `k` of a stack as a volume (`patch_graph.neighbour_slices`), split into jobs: the images
/// whose first stages it takes, in order (`pages` and `units` as [`open`] gave them).
#[wasm_bindgen(js_name = stackAround)]
pub fn stack_around(k: u32, pages: u32, units: u32, settings: JsValue) -> Result<Array, JsError> {
    let settings = settings_in(settings)?;
    let around = stack_image(&[], k, pages, units, 0).around(&settings).map_err(js_err)?;
    Ok(around.into_iter().map(num).collect())
}

fn stack_image(bytes: &[u8], k: u32, pages: u32, units: u32, max_megapixels: u32) -> StackImage<'_> {
    let limits = DecodeLimits { max_megapixels: u64::from(max_megapixels), ..DecodeLimits::default() };
    StackImage { bytes, limits, image: k as usize, pages: pages as usize, units: units as usize }
}

/// One job: the first stage of image `k` of a stack, decoding only the pages it reads; its
/// method planes (an array of Float32Arrays) for [`slice_second_stage`].
#[wasm_bindgen(js_name = sliceFirstStage)]
pub fn slice_first_stage(
    input: &[u8],
    k: u32,
    pages: u32,
    units: u32,
    settings: JsValue,
    max_megapixels: u32,
    on_progress: &Function,
) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let one = stack_image(input, k, pages, units, max_megapixels);
    let planes = one.first_stage(&settings, &JsProgress(on_progress)).map_err(js_err)?;
    let obj = Object::new();
    set(&obj, "planes", &plane_arrays(&planes).into())?;
    Ok(obj.into())
}

/// The last job: image `k` of a stack from the first stages of the images [`stack_around`] it
/// (`basics`: one array of planes each, in order); what [`denoise`] returns, for the image alone.
#[wasm_bindgen(js_name = sliceSecondStage)]
#[allow(clippy::too_many_arguments)]
pub fn slice_second_stage(
    input: &[u8],
    k: u32,
    pages: u32,
    units: u32,
    settings: JsValue,
    basics: &Array,
    max_megapixels: u32,
    on_progress: &Function,
    estimate: bool,
) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let one = stack_image(input, k, pages, units, max_megapixels);
    let original = file::decode_unit(input, &one.limits, one.image).map_err(js_err)?;
    let unit_bytes = file::encode(&original, Format::Tiff, None).map_err(js_err)?;
    // The input image as a run on `unit_bytes` would read it (a unit written alone reads back the same).
    let img = original.unit(0).map_err(js_err)?;
    drop(original);
    let (w, h) = (img.width, img.height);
    let basics = basics
        .iter()
        .map(|b| {
            let b: Array = b.dyn_into().map_err(|_| internal("a first stage sent to the worker is not a list"))?;
            planes_from(&b, w, h)
        })
        .collect::<Result<Vec<_>, JsError>>()?;
    let progress = JsProgress(on_progress);
    let (_, run) = one.second_stage(&settings, basics, estimate, &progress).map_err(js_err)?;
    run_result(&unit_bytes, max_megapixels, &settings, &img, &run)
}

/// First step of a patch-graph run split across workers: the method's planes (an array of
/// Float32Arrays), the
/// sigma and range, and the bands, each one job for a worker ([`run_band`]). No bands when there
/// is nothing to remove (sigma 0). With `probe`, the planes are the error estimate's second
/// input (the image plus the probe, under the model fitted on the image).
#[wasm_bindgen(js_name = prepareRun)]
pub fn prepare_run(input: &[u8], settings: JsValue, max_megapixels: u32, probe: bool) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let img = decode(input, max_megapixels)?;
    let p = pipeline::prepare(&img, &settings).map_err(js_err)?;
    let probed = if probe { pipeline::probe_planes(&img, &p) } else { None };
    // A probe pass that cannot give an estimate is not run: no bands, and the estimate says why.
    let skip = probe && probed.is_none();
    let planes = probed.unwrap_or_else(|| pipeline::method_planes(&p));
    let (sigma, range, spectra, fitted) = (p.model.sigma, p.range, p.spectra(), p.model.clone());
    drop(p);
    let (width, height) = (img.width, img.height);
    drop(img);
    let plan: Vec<Band> = if sigma > 0.0 && !skip {
        let stage = Stage::new(&planes, None, 0, height, sigma, range, &settings.patch_graph, spectra.as_deref())
            .map_err(js_err)?;
        bands::plan(width, height, &stage.profile(), bands::NATIVE_BAND_ROWS)
    } else {
        Vec::new()
    };
    let obj = Object::new();
    set(&obj, "width", &num(width))?;
    set(&obj, "height", &num(height))?;
    set(&obj, "channels", &num(planes.len()))?;
    set(&obj, "sigma", &JsValue::from_f64(sigma))?;
    set(&obj, "range", &JsValue::from_f64(range))?;
    set(&obj, "planes", &plane_arrays(&planes).into())?;
    // Correlated noise: what the first stage's matching compares (null: the luminance itself).
    let guide = if plan.is_empty() { None } else { matching_guide(&planes, spectra.as_deref()) };
    set(&obj, "guide", &guide.map_or(JsValue::NULL, |g| Float32Array::from(g.data.as_slice()).into()))?;
    set(&obj, "bands", &to_js(&plan)?)?;
    // Correlated noise: the spectra every band needs (null for white noise).
    set(&obj, "spectra", &to_js(&spectra)?)?;
    // The fitted noise model, which finishing and the error estimate take back instead of
    // fitting again.
    set(&obj, "fitted", &to_js(&fitted)?)?;
    Ok(obj.into())
}

/// One band of one stage: `noisy` (and for stage 2 `basic`, else empty) hold the band's window,
/// rows [y0, y1) of every plane end to end; `spectra` is what [`prepare_run`] gave, and `guide`
/// (stage 1, else empty) the same window of its guide. Returns the band's sums, {num (planes end
/// to end), den}.
#[wasm_bindgen(js_name = runBand)]
#[allow(clippy::too_many_arguments)]
pub fn run_band(
    settings: JsValue,
    sigma: f64,
    range: f64,
    width: u32,
    full_height: u32,
    band: JsValue,
    spectra: JsValue,
    noisy: &[f32],
    basic: &[f32],
    guide: &[f32],
    on_progress: &Function,
) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let band: Band = from_js(band, "the band description")?;
    if band.y1 <= band.y0 || band.y1 > full_height as usize {
        return Err(internal("the band lies outside the image"));
    }
    let (w, rows) = (width as usize, band.y1 - band.y0);
    let noisy = unflatten(noisy, w, rows)?;
    let basic = if basic.is_empty() { None } else { Some(unflatten(basic, w, rows)?) };
    let guide = if guide.is_empty() { Vec::new() } else { unflatten(guide, w, rows)? };
    let spectra: Option<Vec<NoiseSpectrum>> = from_js(spectra, "the noise spectra")?;
    let stage = Stage::new(
        &noisy,
        basic.as_deref(),
        band.y0,
        full_height as usize,
        sigma,
        range,
        &settings.patch_graph,
        spectra.as_deref(),
    )
    .and_then(|s| s.with_guides(guide.iter().collect()))
    .map_err(js_err)?;
    let acc = stage.run_band(&band, &JsProgress(on_progress)).map_err(js_err)?;
    let all: Vec<f64> = acc.num.iter().flat_map(|n| n.iter().copied()).collect();
    let obj = Object::new();
    set(&obj, "num", &Float64Array::from(all.as_slice()).into())?;
    set(&obj, "den", &Float64Array::from(acc.den.as_slice()).into())?;
    Ok(obj.into())
}

/// The core's band assembler for the page: the page feeds it each band's sums (as [`run_band`]
/// gives them) in any order, and gets the stage's planes back, added in the same order as the
/// command line adds them. The page keeps only the scheduling.
#[wasm_bindgen]
pub struct BandAssembler {
    inner: bands::Assembler<'static>,
    width: usize,
}

#[wasm_bindgen]
impl BandAssembler {
    /// `bands`: the plan as [`prepare_run`] gave it; `planes`: the stage's input planes (an array
    /// of Float32Arrays of `width` x `height`), kept where no patch lands.
    #[wasm_bindgen(constructor)]
    pub fn new(bands: JsValue, width: u32, height: u32, planes: &Array) -> Result<BandAssembler, JsError> {
        let plan: Vec<Band> = from_js(bands, "the band plan")?;
        let (width, height) = (width as usize, height as usize);
        if plan.iter().any(|b| b.y1 <= b.y0 || b.y1 > height) {
            return Err(internal("a band lies outside the image"));
        }
        let fallback = planes_from(planes, width, height)?;
        Ok(BandAssembler { inner: bands::Assembler::new(plan, fallback), width })
    }

    /// Band `index`'s sums: `num` its planes end to end, `den` one plane, over the band's rows.
    pub fn add(&mut self, index: u32, num: &[f64], den: &[f64]) -> Result<(), JsError> {
        let band = self.inner.band(index as usize).ok_or_else(|| internal("no such band"))?;
        let (w, rows, channels) = (self.width, band.y1 - band.y0, self.inner.channels());
        if den.len() != w * rows || num.len() != channels * w * rows {
            return Err(internal("a band's sums do not match its size"));
        }
        let acc = Accumulator {
            x0: 0,
            y0: band.y0,
            width: w,
            height: rows,
            num: num.chunks(w * rows).map(<[f64]>::to_vec).collect(),
            den: den.to_vec(),
        };
        self.inner.add(index as usize, acc).map_err(js_err)
    }

    /// The assembled planes (an array of Float32Arrays), once every band is in.
    pub fn finish(self) -> Result<Array, JsError> {
        Ok(plane_arrays(&self.inner.finish().map_err(js_err)?))
    }
}

/// Last step of a split run: the method's output planes (an array of Float32Arrays) back to an
/// image, as [`denoise`] returns it; `fitted` is what [`prepare_run`] gave (no second fit).
#[wasm_bindgen(js_name = finishRun)]
pub fn finish_run(
    input: &[u8],
    settings: JsValue,
    fitted: JsValue,
    planes: &Array,
    max_megapixels: u32,
) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let img = decode(input, max_megapixels)?;
    let p = pipeline::prepared_from(&img, from_js(fitted, "the fitted noise model")?).map_err(js_err)?;
    let planes = planes_from(planes, img.width, img.height)?;
    if planes.len() != p.working.len() {
        return Err(internal("the planes sent to the worker do not match the image's channels"));
    }
    let run =
        pipeline::finish(&img, &settings, p, MethodOutput { planes, cut_map: None, work_units: 0 }).map_err(js_err)?;
    run_result(input, max_megapixels, &settings, &img, &run)
}

/// The error estimate (an object) from a split run's method planes and its probe pass's
/// ([`prepare_run`] with `probe`, whose `fitted` this takes: the settings play no further part).
#[wasm_bindgen(js_name = estimateError)]
pub fn estimate_error(
    input: &[u8],
    fitted: JsValue,
    result: &Array,
    probe: &Array,
    max_megapixels: u32,
) -> Result<JsValue, JsError> {
    let img = decode(input, max_megapixels)?;
    let p = pipeline::prepared_from(&img, from_js(fitted, "the fitted noise model")?).map_err(js_err)?;
    let result = planes_from(result, img.width, img.height)?;
    let probed = planes_from(probe, img.width, img.height)?;
    if result.len() != p.working.len() || probed.len() != p.working.len() {
        return Err(internal("the planes sent to the worker do not match the image's channels"));
    }
    // Where prepareRun skipped the pass, the planes are unperturbed, and the estimate finds the
    // same reason before it looks at them.
    to_js(&pipeline::estimate_error(&img, &p, result, Some(probed)))
}

/// PSNR and SSIM of `test` against `clean` (both file bytes), as an object.
#[wasm_bindgen]
pub fn compare(clean: &[u8], test: &[u8], max_megapixels: u32) -> Result<JsValue, JsError> {
    let a = decode_file(clean, max_megapixels)?;
    let b = decode_file(test, max_megapixels)?;
    // The result in the reference's value map (float files are each scaled by their own range).
    let q =
        metrics::compare(&a.unit(0).map_err(js_err)?, &b.unit_in(0, a.unit_map(0)).map_err(js_err)?).map_err(js_err)?;
    to_js(&q)
}

/// The patch group of the reference covering pixel (x, y), as an object {positions, similarity, patch}.
#[wasm_bindgen(js_name = groupAt)]
pub fn group_at(input: &[u8], settings: JsValue, x: u32, y: u32, max_megapixels: u32) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let img = decode(input, max_megapixels)?;
    let (g, patch) = pipeline::group_at(&img, &settings, x as usize, y as usize).map_err(js_err)?;
    to_js(&serde_json::json!({"positions": g.positions, "similarity": g.similarity, "patch": patch}))
}

/// Image `k` of a file (a page, or one channel of it) as a file of its own, for the workers: it
/// reads back to the same working image as inside the whole file.
#[wasm_bindgen(js_name = unitFile)]
pub fn unit_file(input: &[u8], k: u32, max_megapixels: u32) -> Result<Uint8Array, JsError> {
    let limits = DecodeLimits { max_megapixels: u64::from(max_megapixels), ..DecodeLimits::default() };
    let one = file::decode_unit(input, &limits, k as usize).map_err(js_err)?;
    let out = file::encode(&one, Format::Tiff, None).map_err(js_err)?;
    Ok(Uint8Array::from(out.as_slice()))
}

/// The whole file again with every image replaced by its result (`results`: one result file per
/// image, in order), in the input's format with its metadata; {file, extension}.
#[wasm_bindgen(js_name = assembleFile)]
pub fn assemble_file(
    input: &[u8],
    results: &Array,
    settings: JsValue,
    max_megapixels: u32,
) -> Result<JsValue, JsError> {
    let settings = settings_in(settings)?;
    let mut doc = decode_file(input, max_megapixels)?;
    if results.length() as usize != doc.units() {
        return Err(internal(format!("{} results for a file of {} images", results.length(), doc.units())));
    }
    for (k, r) in results.iter().enumerate() {
        let r: Uint8Array = r.dyn_into().map_err(|_| internal("a result sent to the worker is not a file"))?;
        let one = decode_file(&r.to_vec(), max_megapixels)?;
        doc.replace_unit(k, &one).map_err(js_err)?;
    }
    let format = doc.result_format();
    let out = file::encode(&doc, format, Some(&Provenance::of(&settings))).map_err(js_err)?;
    let obj = Object::new();
    set(&obj, "file", &bytes(&out))?;
    set(&obj, "extension", &JsValue::from_str(format.extension()))?;
    Ok(obj.into())
}
