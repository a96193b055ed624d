//! Device weight blobs end to end: generated `to_blob` / `from_blob` / `load_blob` against the
//! host packer (`sinew::pack`), every single-bit flip of a small model's blob, truncated and
//! over-long blobs, and blobs of other models. The checksum is checked against `crc32fast`, a
//! general-purpose CRC-32 library, and the published check value of CRC-32/IEEE 802.3.

use sinew::ir::Model;
use sinew::pack;
use sinew_harness::{host, Net};
use sinew_runtime::blob::{offset, BlobError, ScalarKind};
use sinew_tests::{pump_health as ph, valve_gate as vg};

/// Weights for `model` holding the values of a generated `Params`, through the generic view.
fn weights_of<M: Net>(model: &Model, p: &mut M) -> sinew::weights::Weights {
    let flat = host::flat(p);
    let mut layers = Vec::new();
    let mut k = 0;
    for l in model.layers() {
        let w = flat[k..k + l.width * l.fan_in].to_vec();
        k += l.width * l.fan_in;
        let b = flat[k..k + l.width].to_vec();
        k += l.width;
        layers.push(sinew::weights::FlatLayer::new(w, b));
    }
    let (mean, std) = host::scaling(p);
    let scaling = model
        .input()
        .standardize
        .then_some(sinew::weights::Standardization { mean, std });
    sinew::weights::Weights::from_params(model, layers, scaling, None)
}

fn pump() -> (Model, ph::Params, Vec<u8>) {
    let model = host::model_of::<ph::Params>();
    let p: ph::Params = host::generic_params(11);
    let mut buf = vec![0u8; ph::Params::BLOB_BYTES];
    let n = p.to_blob(&mut buf).expect("the buffer is large enough");
    assert_eq!(n, buf.len());
    (model, p, buf)
}

fn valve() -> (Model, vg::Params, Vec<u8>) {
    let model = host::model_of::<vg::Params>();
    let p: vg::Params = host::generic_params(5);
    let mut buf = vec![0u8; vg::Params::BLOB_BYTES];
    p.to_blob(&mut buf).expect("the buffer is large enough");
    (model, p, buf)
}

#[test]
fn the_checksum_is_crc32_of_ieee_802_3() {
    // The check value of CRC-32/IEEE 802.3 over "123456789" (common practice).
    assert_eq!(pack::crc32(b"123456789"), 0xCBF4_3926);
    assert_eq!(crc32fast::hash(b"123456789"), 0xCBF4_3926);
    let mut rng = sinew_runtime::rng::SplitMix64::new(1);
    for len in (0..64).chain([255, 256, 257, 1000, 4099]) {
        let data: Vec<u8> = (0..len).map(|_| rng.next_u64() as u8).collect();
        assert_eq!(pack::crc32(&data), crc32fast::hash(&data), "{len} bytes");
    }
}

#[test]
fn generated_blobs_round_trip_and_equal_the_host_packer() {
    let (model, mut p, blob) = pump();
    assert_eq!(ph::Params::BLOB_VALUES, 185 + 2 * 6);
    assert_eq!(ph::Params::BLOB_BYTES, 24 + 197 * 4);
    assert_eq!(ph::Params::BLOB_BYTES, pack::blob_len(&model));
    assert_eq!(ph::Params::from_blob(&blob), Ok(p.clone()));
    let mut q = ph::Params::zeroed();
    q.load_blob(&blob).expect("a valid blob");
    assert_eq!(q, p);
    // The device writer and the host packer give the same bytes.
    let w = weights_of(&model, &mut p);
    assert_eq!(pack::encode(&model, &w).expect("weights fit"), blob);
    // And the host decoder reads back every value bit for bit.
    let back = pack::decode(&model, &blob).expect("a valid blob");
    let want = pack::values(&w);
    assert!(back
        .iter()
        .zip(&want)
        .all(|(a, b)| a.to_bits() == b.to_bits()));

    let (model, mut p, blob) = valve();
    assert_eq!(blob[offset::SCALAR], ScalarKind::F64.code());
    assert_eq!(vg::Params::from_blob(&blob), Ok(p.clone()));
    let w = weights_of(&model, &mut p);
    assert_eq!(pack::encode(&model, &w).expect("weights fit"), blob);
}

#[test]
fn to_blob_refuses_a_short_buffer_and_writes_nothing() {
    let (_, p, _) = valve();
    let mut buf = vec![0xAAu8; vg::Params::BLOB_BYTES - 1];
    assert_eq!(
        p.to_blob(&mut buf),
        Err(BlobError::BufferTooSmall {
            needed: vg::Params::BLOB_BYTES,
            available: vg::Params::BLOB_BYTES - 1
        })
    );
    assert!(buf.iter().all(|&b| b == 0xAA));
    // A longer buffer is fine: the blob takes its start.
    let mut long = vec![0u8; vg::Params::BLOB_BYTES + 9];
    assert_eq!(p.to_blob(&mut long), Ok(vg::Params::BLOB_BYTES));
    assert_eq!(
        vg::Params::from_blob(&long[..vg::Params::BLOB_BYTES]),
        Ok(p)
    );
}

/// Which check must refuse a blob with a flip at byte `at` (see the layout in the runtime).
fn expected_refusal(at: usize, len: usize) -> &'static str {
    match at {
        0..=3 => "magic",
        4..=5 => "version",
        6 => "scalar",
        7 => "reserved",
        8..=15 => "fingerprint",
        16..=19 => "count",
        _ if at < len => "checksum",
        _ => unreachable!(),
    }
}

fn kind(e: &BlobError) -> &'static str {
    match e {
        BlobError::Magic { .. } => "magic",
        BlobError::Version { .. } => "version",
        BlobError::ScalarKind { .. } => "scalar",
        BlobError::Reserved { .. } => "reserved",
        BlobError::Fingerprint { .. } => "fingerprint",
        BlobError::Count { .. } => "count",
        BlobError::Length { .. } => "length",
        BlobError::Checksum { .. } => "checksum",
        BlobError::BufferTooSmall { .. } => "buffer",
        BlobError::Incomplete { .. } => "incomplete",
    }
}

/// Flips every bit of `blob` in turn and checks that `load` refuses each copy with the check
/// that guards that byte, leaving the parameters as they were.
fn every_bit_flip<P: PartialEq + Clone + std::fmt::Debug>(
    blob: &[u8],
    start: &P,
    load: impl Fn(&mut P, &[u8]) -> Result<(), BlobError>,
) -> usize {
    let mut refused = 0;
    let mut bad = blob.to_vec();
    for at in 0..blob.len() {
        for bit in 0..8 {
            bad[at] ^= 1 << bit;
            let mut p = start.clone();
            match load(&mut p, &bad) {
                Ok(()) => panic!("a flip of bit {bit} of byte {at} was accepted"),
                Err(e) => assert_eq!(
                    kind(&e),
                    expected_refusal(at, blob.len()),
                    "byte {at} bit {bit}: {e}"
                ),
            }
            assert_eq!(&p, start, "a refused blob changed the parameters");
            bad[at] ^= 1 << bit;
            refused += 1;
        }
    }
    assert_eq!(bad, blob);
    refused
}

#[test]
fn every_single_bit_flip_is_refused_by_the_check_that_guards_it() {
    let (_, _, blob) = valve();
    let start: vg::Params = host::generic_params(99);
    let n = every_bit_flip(&blob, &start, |p, b| p.load_blob(b));
    assert_eq!(n, 8 * (24 + 13 * 8));

    let (_, _, blob) = pump();
    let start = ph::Params::zeroed();
    let n = every_bit_flip(&blob, &start, |p, b| p.load_blob(b));
    assert_eq!(n, 8 * 812);
}

#[test]
fn truncated_and_over_long_blobs_are_refused() {
    let (_, p, blob) = valve();
    for len in 0..blob.len() {
        let e = vg::Params::from_blob(&blob[..len]).expect_err("truncated");
        assert_eq!(
            e,
            BlobError::Length {
                found: len,
                expected: blob.len()
            },
            "{len} bytes"
        );
    }
    for extra in 1..=16 {
        let mut long = blob.clone();
        long.extend(std::iter::repeat_n(0u8, extra));
        assert!(matches!(
            vg::Params::from_blob(&long),
            Err(BlobError::Length { .. })
        ));
        // Also with the trailing bytes a copy of the blob's own end.
        let mut long = blob.clone();
        long.extend_from_slice(&blob[blob.len() - extra.min(blob.len())..]);
        assert!(matches!(
            vg::Params::from_blob(&long),
            Err(BlobError::Length { .. })
        ));
    }
    // One more value with a consistent count and checksum is still not this model's blob.
    let mut grown = blob[..blob.len() - 4].to_vec();
    grown.extend_from_slice(&1.5f64.to_le_bytes());
    grown[offset::COUNT..offset::COUNT + 4].copy_from_slice(&14u32.to_le_bytes());
    let crc = pack::crc32(&grown);
    grown.extend_from_slice(&crc.to_le_bytes());
    assert_eq!(
        vg::Params::from_blob(&grown),
        Err(BlobError::Count {
            found: 14,
            expected: 13
        })
    );
    assert_eq!(vg::Params::from_blob(&blob), Ok(p));
}

#[test]
fn blobs_of_other_models_are_refused_by_fingerprint() {
    // The same widths, scalar and scaling with another activation: the value count and every
    // header field but the fingerprint agree.
    let tanh = "model vent\nscalar f32\ninput x 3 standardize\nlayer h 4 tanh\noutput y 2 softmax\nloss cross_entropy\n";
    let relu = tanh.replace("4 tanh", "4 relu");
    let a = sinew::check_source(tanh).model.expect("spec checks");
    let b = sinew::check_source(&relu).model.expect("spec checks");
    assert_eq!(pack::value_count(&a), pack::value_count(&b));
    let blob = pack::encode(&a, &sinew::workflow::init(&a, None)).expect("weights fit");
    assert_eq!(
        pack::decode(&b, &blob),
        Err(BlobError::Fingerprint {
            found: a.fingerprint(),
            expected: b.fingerprint()
        })
    );
    assert!(pack::decode(&a, &blob).is_ok());

    // A generated model refuses the blob of another generated model.
    let greenhouse = sinew_tests::greenhouse_humidity::Params::init(3);
    let mut buf = vec![0u8; sinew_tests::greenhouse_humidity::Params::BLOB_BYTES];
    greenhouse.to_blob(&mut buf).expect("large enough");
    assert!(matches!(
        ph::Params::from_blob(&buf),
        Err(BlobError::Fingerprint { .. })
    ));
    // And an f64 model's blob names the scalar type.
    let (_, _, valve_blob) = valve();
    assert_eq!(
        ph::Params::from_blob(&valve_blob),
        Err(BlobError::ScalarKind {
            found: 2,
            expected: ScalarKind::F32
        })
    );
}
