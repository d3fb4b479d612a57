//! Map tests: the SVG parses as XML (roxmltree) and carries its legend, scale
//! bar and north arrow; PNG pixels (decoded with the `png` crate) show each unit
//! of the tiny fixture in its class colour, holes and gaps in background white.

use super::*;
use crate::render::fixtures::{grid_map, tiny_map};
use crate::render::input::CrsInfo;
use crate::render::png::svg_to_png;
use geo_types::Point;

/// Decodes PNG bytes into (width, height, RGBA pixels).
fn decode(png_bytes: &[u8]) -> (u32, u32, Vec<u8>) {
    let decoder = png::Decoder::new(std::io::Cursor::new(png_bytes));
    let mut reader = decoder.read_info().unwrap();
    let mut pixels = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut pixels).unwrap();
    assert_eq!(info.color_type, png::ColorType::Rgba);
    pixels.truncate(info.buffer_size());
    (info.width, info.height, pixels)
}

fn pixel(image: &(u32, u32, Vec<u8>), x: f64, y: f64) -> Rgb8 {
    let (width, _, pixels) = image;
    let i = ((y.floor() as u32 * width + x.floor() as u32) * 4) as usize;
    Rgb8::new(pixels[i], pixels[i + 1], pixels[i + 2])
}

use crate::render::colour::Rgb8;

/// Pixel of a fixture point: (x, y) in metres from the fixture's origin.
fn at(frame: &MapFrame, dx: f64, dy: f64) -> (f64, f64) {
    frame.to_pixel(500_000.0 + dx, 5_600_000.0 + dy)
}

fn parse(svg: &str) -> roxmltree::Document<'_> {
    roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("not XML: {e}"))
}

fn elements_with_class<'a>(
    doc: &'a roxmltree::Document<'a>,
    class: &str,
) -> Vec<roxmltree::Node<'a, 'a>> {
    doc.descendants()
        .filter(|n| {
            n.attribute("class")
                .is_some_and(|c| c.split(' ').any(|c| c == class))
        })
        .collect()
}

#[test]
fn every_map_kind_is_xml_with_legend_scale_bar_and_north_arrow() {
    let input = tiny_map();
    for kind in [
        MapKind::Folds,
        MapKind::Split { fold: 2 },
        MapKind::Error,
        MapKind::Residual,
    ] {
        let svg = render_map_svg(&input, kind, &MapOptions::default()).unwrap();
        let doc = parse(&svg);
        let root = doc.root_element();
        assert_eq!(root.tag_name().name(), "svg");
        assert_eq!(
            root.tag_name().namespace(),
            Some("http://www.w3.org/2000/svg")
        );
        assert_eq!(root.attribute("data-kind"), Some(kind.slug().as_str()));
        let legend = elements_with_class(&doc, "legend");
        assert_eq!(legend.len(), 1, "{kind:?}");
        let swatches = legend[0]
            .descendants()
            .filter(|n| n.attribute("class") == Some("swatch"))
            .count();
        assert!(swatches >= 3, "{kind:?}: {swatches} swatches");
        assert_eq!(elements_with_class(&doc, "scale-bar").len(), 1);
        assert_eq!(elements_with_class(&doc, "north-arrow").len(), 1);
        let caption: String = elements_with_class(&doc, "caption")[0]
            .descendants()
            .filter_map(|n| n.text())
            .collect();
        assert!(caption.contains("EPSG:32631"), "{caption}");
        assert!(caption.contains("grid north"), "{caption}");
        // Every class fill in the map appears as a legend swatch (classed legends).
        let swatch_fills: Vec<&str> = legend[0]
            .descendants()
            .filter(|n| n.attribute("class") == Some("swatch"))
            .filter_map(|n| n.attribute("fill"))
            .collect();
        for path in elements_with_class(&doc, "class") {
            let fill = path.attribute("fill").unwrap();
            if fill != "none" {
                assert!(
                    swatch_fills.contains(&fill),
                    "{kind:?}: {fill} not in legend {swatch_fills:?}"
                );
            }
        }
    }
}

#[test]
fn error_legend_states_units_breaks_and_rule() {
    let svg = render_map_svg(&tiny_map(), MapKind::Error, &MapOptions::default()).unwrap();
    let doc = parse(&svg);
    let text: Vec<&str> = elements_with_class(&doc, "legend")[0]
        .descendants()
        .filter_map(|n| n.text())
        .collect();
    let all = text.join(" ");
    assert!(all.contains("Absolute error of nitrate (mg/L)"), "{all}");
    // Values 0.5, 1.5, 2.5, 3.5: quintile breaks 1.1, 1.7, 2.3, 2.9 (type 7).
    assert!(all.contains("0.5 \u{2013} 1.1 mg/L"), "{all}");
    assert!(all.contains("2.9 \u{2013} 3.5 mg/L"), "{all}");
    assert!(all.contains("Quantile classes"), "{all}");
}

#[test]
fn png_shows_each_unit_in_its_class_colour_with_holes_and_gaps_empty() {
    let input = tiny_map();
    let options = MapOptions::default();
    let frame = map_frame(&input, &options).unwrap();
    let svg = render_map_svg(&input, MapKind::Error, &options).unwrap();
    let image = decode(&svg_to_png(&svg, options.width).unwrap());
    assert_eq!((image.0, image.1), (options.width, options.height));
    let ramp = sequential(5);
    // Class of each unit from the breaks 1.1, 1.7, 2.3, 2.9: 0, 1, 3, 4.
    let (x, y) = at(&frame, 500.0, 500.0);
    assert_eq!(pixel(&image, x, y), ramp[0]);
    let (x, y) = at(&frame, 1500.0, 500.0);
    assert_eq!(pixel(&image, x, y), ramp[1]);
    let (x, y) = at(&frame, 150.0, 1500.0);
    assert_eq!(pixel(&image, x, y), ramp[3]);
    // The hole of unit 2 is empty: the white background shows.
    let (x, y) = at(&frame, 500.0, 1500.0);
    assert_eq!(pixel(&image, x, y), BACKGROUND);
    // Both parts of the multipolygon are filled, the gap between them is not.
    let (x, y) = at(&frame, 1200.0, 1500.0);
    assert_eq!(pixel(&image, x, y), ramp[4]);
    let (x, y) = at(&frame, 1800.0, 1500.0);
    assert_eq!(pixel(&image, x, y), ramp[4]);
    let (x, y) = at(&frame, 1500.0, 1500.0);
    assert_eq!(pixel(&image, x, y), BACKGROUND);
}

#[test]
fn png_residual_and_split_use_their_styles() {
    let input = tiny_map();
    let options = MapOptions::default();
    let frame = map_frame(&input, &options).unwrap();
    let svg = render_map_svg(&input, MapKind::Residual, &options).unwrap();
    let image = decode(&svg_to_png(&svg, options.width).unwrap());
    // Residuals -0.5, 1.5, -2.5, 3.5: |r| quartiles 1.25, 2.0, 2.75 -> breaks ±1.3 (1.25
    // rounds half away from zero at step 0.1), ±2.0, ±2.8: -0.5 is the centre class.
    let ramp = diverging(3);
    let (x, y) = at(&frame, 500.0, 500.0);
    assert_eq!(pixel(&image, x, y), ramp[3]);
    let (x, y) = at(&frame, 1500.0, 500.0);
    assert_eq!(pixel(&image, x, y), ramp[4]);
    let (x, y) = at(&frame, 150.0, 1500.0);
    assert_eq!(pixel(&image, x, y), ramp[1]);
    let (x, y) = at(&frame, 1200.0, 1500.0);
    assert_eq!(pixel(&image, x, y), ramp[6]);

    let svg = render_map_svg(&input, MapKind::Split { fold: 1 }, &options).unwrap();
    let image = decode(&svg_to_png(&svg, options.width).unwrap());
    let (x, y) = at(&frame, 500.0, 500.0);
    assert_eq!(pixel(&image, x, y), SPLIT_TEST);
    let (x, y) = at(&frame, 150.0, 1500.0);
    assert_eq!(pixel(&image, x, y), SPLIT_TRAINING);
    // Unit 1 is excluded from fold 1: white with grey stripes, both present.
    let mut seen = std::collections::HashSet::new();
    for step in 0..16 {
        let (x, y) = at(&frame, 1300.0 + f64::from(step) * 20.0, 500.0);
        seen.insert(pixel(&image, x, y));
    }
    assert!(
        seen.contains(&BACKGROUND) && seen.contains(&SPLIT_EXCLUDED_HATCH),
        "{seen:?}"
    );
}

#[test]
fn fold_map_colours_regions_by_fold_and_labels_them() {
    let input = tiny_map();
    let options = MapOptions::default();
    let frame = map_frame(&input, &options).unwrap();
    let svg = render_map_svg(&input, MapKind::Folds, &options).unwrap();
    let doc = parse(&svg);
    let labels: Vec<&str> = elements_with_class(&doc, "fold-label")
        .iter()
        .filter_map(|n| n.text())
        .collect();
    assert_eq!(labels, vec!["1", "2", "3", "4"]);
    let image = decode(&svg_to_png(&svg, options.width).unwrap());
    // Away from the label and the unit outlines: each cell is its fold's colour.
    let (x, y) = at(&frame, 200.0, 200.0);
    assert_eq!(pixel(&image, x, y), FOLD_COLOURS_FOR_TEST[0]);
    let (x, y) = at(&frame, 1800.0, 200.0);
    assert_eq!(pixel(&image, x, y), FOLD_COLOURS_FOR_TEST[1]);
}

use crate::render::palette::FOLD_COLOURS as FOLD_COLOURS_FOR_TEST;

#[test]
fn split_of_a_missing_fold_names_the_folds_there_are() {
    let err = render_map_svg(
        &tiny_map(),
        MapKind::Split { fold: 9 },
        &MapOptions::default(),
    )
    .unwrap_err();
    assert_eq!(
        err,
        RenderError::NoSuchFold {
            fold: 9,
            folds: vec![1, 2, 3, 4]
        }
    );
    assert_eq!(
        err.to_string(),
        "no fold 9 in this run: its folds are 1, 2, 3, 4"
    );
}

#[test]
fn every_bad_coordinate_is_reported() {
    let mut input = tiny_map();
    input.units[1].geometry = Geometry::Point(Point::new(f64::NAN, 1.0));
    input.units[3].geometry = Geometry::Point(Point::new(1.0, f64::INFINITY));
    let options = MapOptions {
        id_prefix: "1bad".to_string(),
        ..MapOptions::default()
    };
    let RenderError::Input { problems, .. } =
        render_map_svg(&input, MapKind::Error, &options).unwrap_err()
    else {
        panic!("expected an input error");
    };
    assert_eq!(problems.len(), 3, "{problems:?}");
    assert!(problems[0].starts_with("unit 1:") && problems[1].starts_with("unit 3:"));
    assert!(problems[2].contains("id_prefix"));
}

#[test]
fn units_without_values_and_points_are_drawn() {
    let mut input = tiny_map();
    input.units[0].abs_error = None;
    input.units.push(MapUnit {
        geometry: Geometry::Point(Point::new(501_000.0, 5_601_000.0)),
        fold: Some(1),
        excluded_from: Vec::new(),
        abs_error: Some(9.0),
        residual: Some(9.0),
    });
    let options = MapOptions::default();
    let frame = map_frame(&input, &options).unwrap();
    let svg = render_map_svg(&input, MapKind::Error, &options).unwrap();
    assert!(svg.contains(">No value<"));
    let image = decode(&svg_to_png(&svg, options.width).unwrap());
    let (x, y) = at(&frame, 500.0, 500.0);
    assert_eq!(pixel(&image, x, y), NO_VALUE);
    // The point is a circle of radius 3 px in the top class, drawn last (on top).
    let (x, y) = at(&frame, 1000.0, 1000.0);
    assert_eq!(pixel(&image, x, y), *sequential(5).last().unwrap());
}

#[test]
fn dense_layers_are_rasterised_and_keep_their_colours() {
    // 400 x 300 cells of 10 m: 120,000 units, 480,000 vertices before simplification;
    // cells are about 1.5 px, so they stay rings and exceed the vector limit.
    let input = grid_map(400, 300, 10.0, 50, 5);
    let options = MapOptions::default();
    let svg = render_map_svg(&input, MapKind::Error, &options).unwrap();
    let doc = parse(&svg);
    assert_eq!(elements_with_class(&doc, "raster-layer").len(), 1);
    assert!(svg.contains("rasterised"));
    // Every pixel of the panel's middle is one of the class colours (no blending).
    let image = decode(&svg_to_png(&svg, options.width).unwrap());
    let frame = map_frame(&input, &options).unwrap();
    let ramp = sequential(5);
    let (cx, cy) = frame.to_pixel(2000.0, 1500.0);
    for dy in -20..20 {
        for dx in -20..20 {
            let colour = pixel(&image, cx + f64::from(dx), cy + f64::from(dy));
            assert!(ramp.contains(&colour), "{colour} at {dx},{dy}");
        }
    }
    // The same map is vector when the limit is not reached.
    let small = grid_map(40, 30, 100.0, 5, 5);
    let svg = render_map_svg(&small, MapKind::Error, &options).unwrap();
    assert!(!svg.contains("<image"));
}

#[test]
fn geographic_maps_state_their_projection() {
    let mut input = tiny_map();
    input.crs = CrsInfo::geographic_degrees(4326, "WGS 84");
    for unit in &mut input.units {
        use geo::MapCoords;
        unit.geometry = unit.geometry.map_coords(|c| geo_types::Coord {
            x: 4.0 + (c.x - 500_000.0) / 70_000.0,
            y: 50.0 + (c.y - 5_600_000.0) / 111_000.0,
        });
    }
    input.regions.clear();
    let svg = render_map_svg(&input, MapKind::Error, &MapOptions::default()).unwrap();
    assert!(
        svg.contains("equirectangular projection, standard parallel 50.01\u{00b0}N"),
        "{svg}"
    );
    assert!(svg.contains(">north<"));
}

#[test]
fn maps_without_a_crs_say_so_and_measure_in_coordinate_units() {
    let mut input = tiny_map();
    input.crs = CrsInfo {
        srid: 0,
        name: String::new(),
        geographic: false,
        units_name: String::new(),
        metres_per_unit: 1.0,
        centre_latitude: None,
    };
    let svg = render_map_svg(&input, MapKind::Folds, &MapOptions::default()).unwrap();
    assert!(
        svg.contains("No coordinate reference system is defined (SRID 0)"),
        "{svg}"
    );
    assert!(!svg.contains("EPSG:0"));
    // The tiny fixture is 2,000 units wide: its scale bar is 500 coordinate units.
    assert!(svg.contains(">500 coordinate units<"), "{svg}");
}

#[test]
fn output_is_a_pure_function_of_the_input() {
    let input = grid_map(30, 20, 100.0, 5, 4);
    for kind in [
        MapKind::Folds,
        MapKind::Split { fold: 3 },
        MapKind::Error,
        MapKind::Residual,
    ] {
        let a = render_map_svg(&input, kind, &MapOptions::default()).unwrap();
        let b = render_map_svg(&input.clone(), kind, &MapOptions::default()).unwrap();
        assert_eq!(a, b);
    }
}
