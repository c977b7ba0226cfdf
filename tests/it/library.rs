//! The endmember library against published facts: sanity levels, colours, resampling
//! identities, and the shipped files against their generator.

use thiomap::colour::{lab_to_lch, xyz_to_lab, ColourMatrix};
use thiomap::cube::bandsets;
use thiomap::library::diagnostics::{diagnose, DEFAULT_GROUP_ANGLE_DEG};
use thiomap::library::resample::resample;
use thiomap::library::{starter, Class, Library};

fn member<'a>(lib: &'a Library, id: &str) -> &'a thiomap::library::Endmember {
    lib.members.iter().find(|m| m.id == id).unwrap()
}

#[test]
fn the_shipped_library_equals_its_generator() {
    // spectra-lib/ must be regenerable: cargo run --example make_starter_library
    let shipped = Library::embedded();
    let generated = starter::starter_library();
    assert_eq!(shipped.version, generated.version);
    assert_eq!(shipped.members, generated.members);
    let from_folder =
        Library::load(&std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("spectra-lib"))
            .unwrap();
    assert_eq!(from_folder.members, shipped.members);
}

#[test]
fn the_starter_library_has_the_required_members_and_coverage() {
    let lib = Library::embedded();
    for id in [
        "s8-alpha-room",
        "s8-alpha-cold",
        "sulfur-red-short-chain",
        "sulfur-polymeric",
        "so2-frost-fine",
        "so2-frost-coarse",
        "pyroxene-mafic",
        "olivine-mafic",
        "basalt-dark",
    ] {
        let m = member(&lib, id);
        assert_eq!(m.coverage_um(), (0.25, 5.2), "{id}");
        assert!(m
            .notes
            .as_deref()
            .unwrap()
            .contains("NOT a laboratory measurement"));
    }
    // 10 nm bands in the visible need samples finer than 10 nm there.
    let m = member(&lib, "s8-alpha-room");
    let visible: Vec<f64> = m
        .wavelength_um
        .iter()
        .cloned()
        .filter(|w| *w < 0.8)
        .collect();
    assert!(visible.windows(2).all(|w| w[1] - w[0] <= 0.0021));
}

#[test]
fn so2_frost_sanity_levels() {
    // REFERENCES #15: Nash, Fanale & Nelson 1980, GRL 7:665 (read): R(0.30) ≤ 0.05 and
    // R ≥ 0.75 over 0.40–0.85 µm.
    let lib = Library::embedded();
    for id in ["so2-frost-fine", "so2-frost-coarse"] {
        let m = member(&lib, id);
        assert!(m.at(0.30).unwrap() <= 0.05, "{id}");
        for i in 0..=45 {
            let wl = 0.40 + 0.01 * i as f64;
            assert!(m.at(wl).unwrap() >= 0.75, "{id} at {wl}");
        }
        // ν1+ν3 at 4.07 µm is the strongest band (near-saturated for grains ≥ 30 µm; from memory)
        assert!(m.at(4.07).unwrap() < 0.1 * m.at(3.0).unwrap(), "{id}");
    }
}

#[test]
fn alpha_s8_sanity_levels() {
    // Powdered α-S8 shows no molecular UV bands at 0.265 / 0.285 µm: below the edge the
    // spectrum is a floor that only rises toward the edge (from memory; those bands belong to
    // S8 in solution or thin films). A band there would show as a dip: a step that falls.
    let lib = Library::embedded();
    for id in ["s8-alpha-room", "s8-alpha-cold"] {
        let m = member(&lib, id);
        let floor: Vec<f64> = (0..=40)
            .map(|i| m.at(0.25 + 0.002 * i as f64).unwrap())
            .collect();
        for (i, w) in floor.windows(2).enumerate() {
            assert!(
                w[1] >= w[0] - 1e-4,
                "{id}: falls at {:.3} µm",
                0.25 + 0.002 * i as f64
            );
        }
        assert!(floor[0] < 0.1, "{id}: UV floor {}", floor[0]);
    }
    // REFERENCES #15 (from memory; Sill & Clark 1982, Gradie & Veverka 1984):
    // room-temperature α-S8 has R(0.40) < 0.2 and R(0.55) > 0.7.
    let m = member(&lib, "s8-alpha-room");
    assert!(m.at(0.40).unwrap() < 0.2);
    assert!(m.at(0.55).unwrap() > 0.7);
    // Cold α-S8's edge lies shortward (from memory: by 0.02–0.04 µm).
    let cold = member(&lib, "s8-alpha-cold");
    let half = |m: &thiomap::library::Endmember| {
        let target = 0.5 * (m.at(0.40).unwrap_or(0.0) + m.at(0.60).unwrap());
        (0..300)
            .map(|i| 0.35 + 0.001 * i as f64)
            .find(|w| m.at(*w).unwrap() >= target)
            .unwrap()
    };
    let shift = half(m) - half(cold);
    assert!((0.02..=0.04).contains(&shift), "{shift}");
}

fn lch(m: &thiomap::library::Endmember) -> [f64; 3] {
    let cm = ColourMatrix::for_wavelengths(&m.wavelength_um);
    lab_to_lch(xyz_to_lab(cm.xyz(&m.reflectance).unwrap()))
}

#[test]
fn members_render_in_the_colours_of_their_materials() {
    // REFERENCES #16, common practice: L*C*h under D65 of each class's colour name.
    let lib = Library::embedded();
    let [l, c, h] = lch(member(&lib, "s8-alpha-room"));
    assert!(
        (75.0..=105.0).contains(&h) && c >= 40.0 && l >= 70.0,
        "α-S8 yellow: {l} {c} {h}"
    );
    let [_, c, h] = lch(member(&lib, "sulfur-red-short-chain"));
    assert!(
        (0.0..=50.0).contains(&h) && c >= 30.0,
        "red sulfur: {c} {h}"
    );
    // Cold α-S8 is paler than at room temperature (Sill & Clark 1982, from memory): less
    // chroma, no darker, still yellow.
    let [l_room, c_room, _] = lch(member(&lib, "s8-alpha-room"));
    let [l_cold, c_cold, h_cold] = lch(member(&lib, "s8-alpha-cold"));
    assert!(
        c_cold <= c_room - 10.0 && l_cold >= l_room && (75.0..=105.0).contains(&h_cold),
        "cold α-S8 {l_cold} {c_cold} {h_cold} against room {l_room} {c_room}"
    );
    let [l, _, h] = lch(member(&lib, "sulfur-polymeric"));
    assert!(
        (40.0..=75.0).contains(&h) && (35.0..=70.0).contains(&l),
        "polymeric: {l} {h}"
    );
    for id in ["so2-frost-fine", "so2-frost-coarse"] {
        let [l, c, _] = lch(member(&lib, id));
        assert!(l >= 85.0 && c <= 10.0, "{id} white: {l} {c}");
    }
    let [l, _, _] = lch(member(&lib, "basalt-dark"));
    assert!(l <= 35.0, "basalt near black: {l}");
}

#[test]
fn shipped_band_sets_resample_the_whole_library() {
    let lib = Library::embedded();
    for (name, _) in bandsets::SHIPPED {
        let bands = bandsets::resolve(name).unwrap().bands;
        let r = resample(&lib, &bands).unwrap();
        assert_eq!(r.matrix.dim(), (bands.len(), lib.members.len()));
        assert!(r.matrix.iter().all(|v| v.is_finite() && *v >= 0.0));
    }
    let n = |name| bandsets::resolve(name).unwrap().bands.len();
    assert_eq!(
        (n("imager-7"), n("spectrometer-24"), n("mapper-96")),
        (7, 24, 96)
    );
    let imager = bandsets::resolve("imager-7").unwrap().bands;
    for b in imager.bands() {
        let half = b.fwhm_um().unwrap() / 2.0;
        assert!(b.centre_um - half >= 0.38 && b.centre_um + half <= 0.98);
    }
}

#[test]
fn the_imager_cannot_separate_the_frosts_and_the_groups_stay_within_a_class() {
    let lib = Library::embedded();
    for (name, _) in bandsets::SHIPPED {
        let bands = bandsets::resolve(name).unwrap().bands;
        let d = diagnose(&resample(&lib, &bands).unwrap(), DEFAULT_GROUP_ANGLE_DEG);
        for g in &d.groups {
            let classes: Vec<Class> = g.members.iter().map(|id| member(&lib, id).class).collect();
            assert!(classes.iter().all(|c| *c == g.class), "{name}: {g:?}");
        }
        if *name == "imager-7" {
            // The two frosts differ only beyond 1.9 µm: a visible imager sees one.
            assert!(
                d.groups
                    .iter()
                    .any(|g| g.id == "so2-frost-fine+so2-frost-coarse"),
                "{:?}",
                d.groups
            );
        }
        if *name == "mapper-96" {
            assert!(d.groups.is_empty(), "{name}: {:?}", d.groups);
        }
    }
}

#[test]
fn our_lab_matches_the_colorimetry_crates_own_computation() {
    // colorimetry 0.1 (a general-purpose colour library): Observer::lab_d65 of a Colorant
    // built from the same spectrum; our precomputed matrix and Lab formula must agree.
    use colorimetry::colorant::Colorant;
    use colorimetry::observer::Observer;
    use colorimetry::spectrum::Spectrum;
    let lib = Library::embedded();
    for m in &lib.members {
        let nm: Vec<f64> = m.wavelength_um.iter().map(|w| w * 1000.0).collect();
        let spectrum = Spectrum::linear_interpolate(&nm, &m.reflectance).unwrap();
        let reference = Observer::Cie1931
            .lab_d65(&Colorant::new(spectrum).unwrap())
            .to_array();
        let cm = ColourMatrix::for_wavelengths(&m.wavelength_um);
        let ours = xyz_to_lab(cm.xyz(&m.reflectance).unwrap());
        for k in 0..3 {
            assert!(
                (ours[k] - reference[k]).abs() < 0.05,
                "{}: {ours:?} vs {reference:?}",
                m.id
            );
        }
    }
}
