//! `slotwise bench import` end to end: it runs the real importers and reports the documented
//! fields (docs/throughput.md, "Importing"). No timing is asserted: speed is the benchmark's
//! output, not a test's verdict.

mod common;
use common::ok;

#[test]
fn bench_import_quick_json_has_the_documented_fields() {
    let out = ok(&["bench", "import", "--quick", "--json", "--reps", "1"]);
    let v: serde_json::Value = serde_json::from_str(&out).expect("JSON report");
    assert_eq!(v["quick"].as_bool(), Some(true));
    assert_eq!(v["reps"].as_u64(), Some(1));
    assert!(v["cpu"].as_str().is_some_and(|c| !c.is_empty()));
    let rows = v["rows"].as_array().expect("rows");
    let inputs: Vec<&str> = rows.iter().map(|r| r["input"].as_str().unwrap()).collect();
    assert_eq!(inputs, ["text", "binary"]);
    for r in rows {
        for figure in ["import", "read_floor", "writer_alone"] {
            for field in ["ns_per_item", "m_items_per_s", "mb_per_s"] {
                let x = r[figure][field].as_f64();
                assert!(x.is_some_and(|x| x > 0.0), "{figure}.{field} in {r}");
            }
        }
        for field in ["import_x_floor", "writer_share"] {
            assert!(r[field].as_f64().is_some_and(|x| x > 0.0), "{field} in {r}");
        }
        assert!(r["floor_method"].as_str().is_some_and(|m| !m.is_empty()));
        assert!(r["target"].as_str().is_some_and(|t| !t.is_empty()));
        assert!(r["target_met"].is_boolean());
        // The importer's capture is the writer's, byte for byte, from the generated events.
        assert_eq!(r["capture_identical"].as_bool(), Some(true), "{r}");
        let (items, events) = (r["items"].as_u64().unwrap(), r["events"].as_u64().unwrap());
        assert!(r["input_bytes"].as_u64().unwrap() >= items * 4);
        assert!(events > 0 && events <= items);
    }
    // The text export has one header line; every other line is an event.
    assert_eq!(rows[0]["unit"], "line");
    assert_eq!(
        rows[0]["events"].as_u64(),
        Some(rows[0]["items"].as_u64().unwrap() - 1)
    );
    assert_eq!(rows[1]["unit"], "record");
}

#[test]
fn bench_import_table_names_each_figure_and_its_target() {
    let out = ok(&["bench", "import", "--quick", "--reps", "1"]);
    for want in [
        "import",
        "read floor",
        "capture writer alone",
        "M lines/s",
        "memory speed",
    ] {
        assert!(out.contains(want), "{want:?} missing from\n{out}");
    }
}
