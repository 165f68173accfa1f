"""Bad inputs: each case is refused with one line (exit status 2, no traceback, nothing
written) or read with a stated assumption; never a silent wrong answer.

Sources: the output contract of DESIGN.md (bad input is one clear line, exit 2, nothing
written) for the refusals; the legal definition of the US survey foot (1200/3937 m exactly,
US Metric Act of 1866 / Mendenhall Order 1893) for a replaced CRS; the ranges of longitude
(±180°) and latitude (±90°) by definition; the plausible elevation range -500 to 9 000 m
(Dead Sea shore about -430 m, highest summit about 8 850 m: values from memory); the
Unicode byte-order marks and the cp1252 code page (Python's codecs); the TIFF 6.0 magic
number (``II*\\0``); matplotlib's ``jacksboro_fault_dem.npz`` (a real 3-arc-second DEM)
and pyproj's Geod (Karney 2013) for the snapping radius on the ground.
"""

import codecs
import json

import numpy as np
import pandas as pd
import pytest
import rasterio
from affine import Affine
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from basinkit import read_dem, route, terrain_from_array
from basinkit.cli.main import main
from basinkit.errors import BasinkitError, InputError, JobFileError
from basinkit.io.outlets import read_outlet_file, read_outlets

UTM = "EPSG:32633"
TR = Affine(10, 0, 500000, 0, -10, 5000000)
NR, NC = 40, 30


def plane(nr=NR, nc=NC):
    """A plane tilted to the south with a slight eastward tilt (drains to the south edge)."""
    r, c = np.mgrid[0:nr, 0:nc]
    return (200.0 - 2.0 * r + 0.05 * c).astype(np.float32)


def write_tif(path, data, transform=TR, crs=UTM, nodata=None):
    data = np.asarray(data, dtype=np.float32)
    profile = dict(driver="GTiff", width=data.shape[1], height=data.shape[0], count=1,
                   dtype="float32", transform=transform, nodata=nodata)
    if crs is not None:
        profile["crs"] = crs
    with rasterio.open(path, "w", **profile) as ds:
        ds.write(data, 1)
    return path


def run(argv, capsys):
    """Run the CLI quietly; return (exit code, stderr)."""
    with pytest.raises(SystemExit) as exc:
        main(["--quiet"] + [str(a) for a in argv])
    err = capsys.readouterr().err
    return (exc.value.code or 0), err


def refused(argv, capsys, fragment, out=None):
    """Exit status 2, one line on stderr naming the problem, no traceback, nothing
    written (DESIGN.md, the output contract)."""
    code, err = run(argv, capsys)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2, err
    assert "Traceback" not in err
    assert len(lines) == 1, err
    assert fragment in lines[0], lines[0]
    if out is not None:
        assert not out.exists() or not any(out.iterdir()), list(out.iterdir())
    return lines[0]


@pytest.fixture(scope="module")
def dem(tmp_path_factory):
    return write_tif(tmp_path_factory.mktemp("dem") / "plane.tif", plane())


# --------------------------------------------------------------------------- the CRS
def test_crs_option_on_a_dem_with_a_crs_is_refused(dem, tmp_path, capsys):
    """--crs is for a DEM without one: a different CRS is refused naming --replace-crs;
    the same CRS is accepted (DESIGN.md, the output contract)."""
    line = refused(["route", dem, "--crs", "EPSG:2277", "-o", tmp_path / "f"], capsys,
                   "already has a CRS", tmp_path / "f")
    assert "--replace-crs EPSG:2277" in line
    refused(["route", dem, "--crs", "EPSG:4326", "-o", tmp_path / "g"], capsys,
            "already has a CRS", tmp_path / "g")
    code, err = run(["route", dem, "--crs", UTM, "-o", tmp_path / "h"], capsys)
    assert code == 0, err
    meta = json.loads((tmp_path / "h" / "flow.json").read_text())
    assert meta["inputs"]["dem"]["crs_from"] == "file"


def test_replace_crs_is_recorded_and_changes_units(dem, tmp_path, capsys):
    """--replace-crs EPSG:2277 (US survey feet) on a metre grid: every area shrinks by
    (1200/3937)² exactly (the US survey foot's legal definition), and flow.json records
    the replacement and the CRS the file stated."""
    code, err = run(["route", dem, "-o", tmp_path / "m"], capsys)
    assert code == 0, err
    code, err = run(["route", dem, "--replace-crs", "EPSG:2277", "-o", tmp_path / "ft"],
                    capsys)
    assert code == 0, err
    with rasterio.open(tmp_path / "m" / "upstream_area_m2.tif") as a, \
            rasterio.open(tmp_path / "ft" / "upstream_area_m2.tif") as b:
        am, af = a.read(1), b.read(1)
    np.testing.assert_allclose(np.nanmax(af) / np.nanmax(am), (1200 / 3937) ** 2, rtol=1e-6)
    rec = json.loads((tmp_path / "ft" / "flow.json").read_text())["inputs"]["dem"]
    assert rec["crs_from"].startswith("--replace-crs")
    assert rec["crs_in_file"].startswith("EPSG:32633")
    refused(["route", dem, "--crs", UTM, "--replace-crs", "EPSG:2277", "-o", tmp_path / "x"],
            capsys, "not both", tmp_path / "x")


def test_degrees_beyond_their_range_are_refused(tmp_path, capsys):
    """A file tagged EPSG:4326 whose coordinates are metres (x 500 000) is refused: a
    longitude lies within ±180° by definition. So is --replace-crs EPSG:4326 on a UTM file;
    a real geographic grid is accepted."""
    bad = write_tif(tmp_path / "metres_as_degrees.tif", plane(), crs="EPSG:4326")
    refused(["route", bad, "-o", tmp_path / "f"], capsys, "beyond ±180° / ±90°",
            tmp_path / "f")
    utm = write_tif(tmp_path / "utm.tif", plane())
    refused(["route", utm, "--replace-crs", "EPSG:4326", "-o", tmp_path / "g"], capsys,
            "not degrees")
    good = write_tif(tmp_path / "deg.tif", plane(),
                     transform=Affine(1 / 1200, 0, -97.5, 0, -1 / 1200, 33.5), crs="EPSG:4326")
    assert read_dem(good).crs.is_geographic


# ------------------------------------------------------------ rasters without georeferencing
def write_png(path, z):
    import warnings

    from rasterio.errors import NotGeoreferencedWarning

    warnings.simplefilter("ignore", NotGeoreferencedWarning)
    with rasterio.open(path, "w", driver="PNG", width=z.shape[1], height=z.shape[0], count=1,
                       dtype="uint16") as ds:
        ds.write(z.astype(np.uint16), 1)
    return path


def test_png_needs_its_transform(tmp_path, capsys):
    """A PNG has no georeferencing (GDAL reports the identity transform): refused, naming
    --cell-size and --origin, even with --crs. With them, row 0 of the image is the
    northern row (rows top-down) and the grid sits where the user said (common practice,
    no source)."""
    z = plane().astype(np.uint16)
    png = write_png(tmp_path / "dem.png", z)
    refused(["route", png, "--crs", UTM, "-o", tmp_path / "f"], capsys, "--cell-size",
            tmp_path / "f")
    refused(["route", png, "--crs", UTM, "--cell-size", "10", "-o", tmp_path / "f"], capsys,
            "go together")
    t = read_dem(png, crs=UTM, cell_size=10, origin=(500000, 5000000))
    assert np.array_equal(t.elevation, z.astype(np.float32))  # not flipped
    assert t.transform == Affine(10, 0, 500000, 0, -10, 5000000)
    assert t.source["georeferencing"].startswith("given")
    code, err = run(["route", png, "--crs", UTM, "--cell-size", "10", "--origin",
                     "500000,5000000", "-o", tmp_path / "ok"], capsys)
    assert code == 0, err
    dem = write_tif(tmp_path / "geo.tif", plane())
    refused(["route", dem, "--cell-size", "10", "--origin", "0,0", "-o", tmp_path / "g"],
            capsys, "has its own georeferencing")


# ------------------------------------------------------------------ implausible elevations
def test_implausible_elevations(tmp_path, capsys):
    """Fill values of 1e30 are refused with their count (default range -500 to 9 000 m,
    from the lowest dry land and the highest summit, values from memory), or become nodata
    on request and are counted in flow.json; --elevation-range moves the bounds."""
    z = plane()
    z[5, 5] = z[6, 7] = 1e30
    p = write_tif(tmp_path / "fill.tif", z)
    line = refused(["route", p, "-o", tmp_path / "f"], capsys, "2 cells", tmp_path / "f")
    assert "--implausible-elevations nodata" in line
    code, err = run(["route", p, "--implausible-elevations", "nodata", "-o", tmp_path / "n"],
                    capsys)
    assert code == 0, err
    rec = json.loads((tmp_path / "n" / "flow.json").read_text())["inputs"]["dem"]
    assert rec["implausible_elevation_cells"] == 2
    with rasterio.open(tmp_path / "n" / "elevation_conditioned.tif") as ds:
        zi = ds.read(1)
    assert np.isnan(zi[5, 5]) and np.nanmax(zi) < 300
    refused(["route", write_tif(tmp_path / "ok.tif", plane()), "--elevation-range", "0,150",
             "-o", tmp_path / "r"], capsys, "outside the plausible range 0 to 150 m")
    refused(["route", p, "--elevation-range", "9,1", "-o", tmp_path / "s"], capsys,
            "MIN < MAX")


def test_truncated_tiff_is_called_damaged(tmp_path, capsys):
    """A GeoTIFF cut inside its header loses its georeferencing tags but still opens: it is
    called damaged or truncated, not told to add --crs (DESIGN.md, the output contract)."""
    whole = write_tif(tmp_path / "whole.tif", np.tile(plane(), (4, 4)))
    data = whole.read_bytes()
    for n in (200, 300, len(data) // 2):
        cut = tmp_path / f"cut{n}.tif"
        cut.write_bytes(data[:n])
        line = refused(["route", cut, "-o", tmp_path / f"o{n}"], capsys, "damaged or "
                       "truncated", tmp_path / f"o{n}")
        assert "--crs" not in line


def test_job_inputs_carry_the_dem_checks(tmp_path):
    """The job file's [inputs] takes the same keys, and the flow step's settings carry them
    to the same reader (one pipeline, DESIGN.md)."""
    from basinkit.workflow.jobfile import job_from_dict
    from basinkit.workflow.runner import settings_of
    from basinkit.workflow.steps.flow import read_terrain

    z = plane()
    z[3, 3] = -9999.0
    p = write_tif(tmp_path / "d.tif", z)
    job = job_from_dict({"inputs": {"dem": str(p), "implausible_elevations": "nodata",
                                    "elevation_range_m": [-100, 500]}}, base=tmp_path)
    fs = settings_of(job)["flow"]
    assert fs.elevation_range_m == (-100.0, 500.0) and fs.implausible_elevations == "nodata"
    t = read_terrain(fs)
    assert not t.valid[3, 3] and t.source["implausible_elevation_cells"] == 1
    with pytest.raises(JobFileError, match="replace_crs"):
        job_from_dict({"inputs": {"dem": str(p), "crs": UTM, "replace_crs": "EPSG:2277"}},
                      base=tmp_path)
    with pytest.raises(JobFileError, match="two numbers"):
        job_from_dict({"inputs": {"dem": str(p), "origin": "a,b", "cell_size": 1.0}},
                      base=tmp_path)
    with pytest.raises(JobFileError, match="go together"):
        job_from_dict({"inputs": {"dem": str(p), "cell_size": 1.0}}, base=tmp_path)


# ------------------------------------------------------------------------- outlet files
@pytest.fixture(scope="module")
def flow_dir(tmp_path_factory, dem):
    out = tmp_path_factory.mktemp("flow") / "flow"
    with pytest.raises(SystemExit) as exc:
        main(["--quiet", "route", str(dem), "-o", str(out)])
    assert not exc.value.code
    return out


def xy(col, row):
    """Map coordinates of a cell centre of the plane DEM."""
    return 500000 + 10 * col + 5.0, 5000000 - 10 * row - 5.0


def test_bom_keeps_the_id_column(tmp_path, flow_dir, capsys):
    """A UTF-8 byte-order mark (EF BB BF, Python's codecs.BOM_UTF8) before the header is
    not part of the first column's name: ids are read, with x and y in any order."""
    x, y = xy(10, 30)
    p = tmp_path / "bom.csv"
    p.write_bytes(codecs.BOM_UTF8 + f"x,y,id\n{x},{y},gauge\n".encode())
    raw, err = read_outlet_file(p)
    assert raw["outlet_id"].tolist() == ["gauge"] and not len(err)
    code, err = run(["delineate", flow_dir, "--outlets", p, "-o", tmp_path / "o"], capsys)
    assert code == 0, err
    assert pd.read_csv(tmp_path / "o" / "catchments.csv")["outlet_id"].tolist() == ["gauge"]


def test_utf16_and_cp1252_tables(tmp_path):
    """UTF-16 with its BOM is decoded; bytes that are not UTF-8 are read as cp1252 with a
    note naming the byte and line ('é' is 0xE9 in cp1252, Python's codecs)."""
    x, y = xy(10, 30)
    p = tmp_path / "u16.csv"
    p.write_bytes(f"id,x,y\nMühle,{x},{y}\n".encode("utf-16"))
    assert read_outlet_file(p)[0]["outlet_id"].tolist() == ["Mühle"]
    q = tmp_path / "cp.csv"
    q.write_bytes(f"id,x,y\nCafé,{x},{y}\n".encode("cp1252"))
    f = read_outlets(q)
    assert f.raw["outlet_id"].tolist() == ["Café"]
    assert len(f.notes) == 1 and "0xE9 on line 2" in f.notes[0] and "cp1252" in f.notes[0]


def test_semicolons_and_decimal_commas(tmp_path):
    """'513544,15' with ';' between fields is the European spreadsheet export: read as
    513544.15 (common practice, no source), the same points as the comma-and-dot file."""
    a = tmp_path / "dot.csv"
    a.write_text("id,x,y\nA,500105.5,4999695.25\nB,500205,4999605\n")
    b = tmp_path / "comma.csv"
    b.write_text("id;x;y\nA;500105,5;4999695,25\nB;500205;4999605\n")
    ra, rb = read_outlet_file(a)[0], read_outlet_file(b)[0]
    np.testing.assert_array_equal(ra[["x_given", "y_given"]], rb[["x_given", "y_given"]])
    assert any("decimal commas" in n for n in read_outlets(b).notes)
    c = tmp_path / "ambiguous.csv"
    c.write_text("id,x,y\nA,500105,5,4999695,25\n")
    raw, err = read_outlet_file(c)
    assert not len(raw) and "separate the fields with ';'" in err["reason"][0]


@pytest.mark.parametrize("name, content, fragment", [
    ("empty.csv", b"", "is empty"),
    ("blank.csv", b"\n  \n", "is empty"),
    ("header.csv", b"x,y,id\n", "has a header (x, y, id) but no rows"),
    ("json.csv", b'{"type": "FeatureCollection", "features": []}', "holds JSON"),
    ("tiff.csv", b"II*\x00" + bytes(200), "is a TIFF image"),
    ("nul.csv", b"id,x,y\n\x00\x01\x02", "binary"),
    ("noheader.csv", b"500105,4999695\n", "no header line"),
    ("onecol.csv", b"id x y\na 1 2\n", "single column"),
    ("nocols.csv", b"a,b\n1,2\n", "needs x and y"),
    ("quote.csv", b'id,x,y\n"a,1,2\n', "unclosed or stray quote"),
    ("points.tif", b"II*\x00" + bytes(200), "is a TIFF image, not outlet points"),
    ("empty.geojson", b"", "is empty"),
])
def test_unusable_outlet_files(tmp_path, flow_dir, capsys, name, content, fragment):
    """Each kind of file that cannot be a table of outlets gets its own message, not
    'Could not determine delimiter' or 'no outlets given' (DESIGN.md, the output contract:
    one line, exit 2, nothing written)."""
    p = tmp_path / name
    p.write_bytes(content)
    line = refused(["delineate", flow_dir, "--outlets", p, "-o", tmp_path / "o"], capsys,
                   fragment, tmp_path / "o")
    assert "no outlets given" not in line and "delimiter" not in line


def test_truncated_row_is_listed_and_the_rest_go_on(tmp_path, flow_dir, capsys):
    """A last row cut short (too few fields, no final newline) goes to outlet_errors.csv
    naming the truncation; the other outlets are delineated and the exit status is 1
    (DESIGN.md: batches record per-item failures and go on)."""
    (x1, y1), (x2, _) = xy(10, 30), xy(20, 30)
    p = tmp_path / "cut.csv"
    p.write_text(f"id,x,y\nA,{x1},{y1}\nB,{x2}")
    code, err = run(["delineate", flow_dir, "--outlets", p, "-o", tmp_path / "o"], capsys)
    assert code == 1 and "Traceback" not in err
    errs = pd.read_csv(tmp_path / "o" / "outlet_errors.csv")
    assert errs["outlet_id"].tolist() == ["B"]
    assert "2 of the header's 3 fields" in errs["reason"][0] and "truncated" in errs["reason"][0]


def test_job_file_encodings(tmp_path, dem):
    """A job file with a UTF-8 BOM reads as the same job without it; TOML is UTF-8 (TOML
    1.0 specification), so cp1252 bytes are refused naming the byte; an empty file or a
    TIFF given as the job is told so."""
    from basinkit.workflow.jobfile import read_job

    text = f'[job]\nname = "Mühle"\n[inputs]\ndem = "{dem}"\n'
    a, b = tmp_path / "a.toml", tmp_path / "b.toml"
    a.write_text(text, encoding="utf-8")
    b.write_bytes(codecs.BOM_UTF8 + text.encode("utf-8"))
    assert read_job(b).sections == read_job(a).sections
    c = tmp_path / "c.toml"
    c.write_bytes(text.encode("cp1252"))
    with pytest.raises(JobFileError, match="not UTF-8 text .byte 0xFC on line 2"):
        read_job(c)
    for name, content, fragment in (("e.toml", b"", "is empty"),
                                    ("t.toml", b"II*\x00" + bytes(99), "TIFF image")):
        (tmp_path / name).write_bytes(content)
        with pytest.raises(JobFileError, match=fragment):
            read_job(tmp_path / name)


def test_job_file_with_bom_via_cli(tmp_path, dem, capsys):
    """`basinkit run JOB --check` on a job with a BOM: exit 0 (it used to fail with
    'Invalid statement (at line 1, column 1)')."""
    j = tmp_path / "j.toml"
    j.write_bytes(codecs.BOM_UTF8 + f'[inputs]\ndem = "{dem}"\n'.encode())
    with pytest.raises(SystemExit) as exc:
        main(["run", str(j), "--check"])
    capsys.readouterr()
    assert not exc.value.code


# ----------------------------------------------------------------- property tests (hypothesis)
_CSV_ALPHABET = st.sampled_from(list("id,xy;\t|\"'\n\r .-+0123456789eéÿ\ufeff") +
                                ["\x00", "lon", "lat", "outlet_id", "500105", "4999695"])


@settings(max_examples=200, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=st.lists(_CSV_ALPHABET, max_size=60).map("".join),
       encoding=st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "cp1252", "latin-1"]))
def test_malformed_outlet_csvs_never_crash(tmp_path_factory, text, encoding):
    """Any bytes given as an outlet CSV: a table or an InputError, nothing else (DESIGN.md:
    never a traceback for a user mistake)."""
    p = tmp_path_factory.mktemp("h") / "o.csv"
    try:
        p.write_bytes(text.encode(encoding))
    except UnicodeEncodeError:
        p.write_bytes(text.encode("utf-8"))
    try:
        f = read_outlets(p)
    except InputError as exc:
        assert str(exc) and "\n" not in str(exc).strip()
        return
    assert list(f.raw.columns)[:4] == ["outlet_id", "source", "x_given", "y_given"]
    assert np.isfinite(f.raw["x_given"]).all() and np.isfinite(f.raw["y_given"]).all()


_TOML_BITS = st.sampled_from(["[inputs]", "[job]", "[outlets]", "dem = ", '"x.tif"', "\n",
                              "snap_radius_m = ", "-1", "1e400", "[", "]", "=", '"', "é",
                              "\ufeff", "\x00", "workers = 0", "origin = [1, 2]",
                              "elevation_range_m = [5, 1]", "true", "{", "}"])


@settings(max_examples=200, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(parts=st.lists(_TOML_BITS, max_size=30),
       encoding=st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "cp1252"]))
def test_malformed_job_files_never_crash(tmp_path_factory, parts, encoding):
    """Any job file: a JobSpec or a BasinkitError, never another exception (DESIGN.md)."""
    from basinkit.workflow.jobfile import read_job

    p = tmp_path_factory.mktemp("j") / "job.toml"
    text = "".join(parts)
    try:
        p.write_bytes(text.encode(encoding))
    except UnicodeEncodeError:
        p.write_bytes(text.encode("utf-8"))
    try:
        read_job(p)
    except BasinkitError as exc:
        assert str(exc)


# ------------------------------------------------------------------------------ snapping
@pytest.fixture(scope="module")
def jacksboro_fm():
    """matplotlib's jacksboro_fault_dem.npz: a real 3-arc-second DEM (rows north to south;
    the file's ymin/ymax are swapped)."""
    from matplotlib import cbook

    with cbook.get_sample_data("jacksboro_fault_dem.npz") as d:
        z = np.asarray(d["elevation"], dtype=np.float64)
        dx, dy = float(d["dx"]), float(d["dy"])
        west, north = float(d["xmin"]), max(float(d["ymin"]), float(d["ymax"]))
    t = terrain_from_array(z, transform=Affine(dx, 0, west, 0, -dy, north), crs="EPSG:4326")
    return route(t)


def test_default_snap_radius_is_one_cell_on_a_3_arc_second_dem(jacksboro_fm):
    """On the 3″ Jacksboro grid the default radius is one cell measured on the ground: the
    larger side of a middle-row cell, here the north-south side, which pyproj's Geod
    (Karney 2013) gives independently (about 92 m, not the old 3 cells = 277 m)."""
    from pyproj import Geod

    from basinkit.analysis.outlets import default_snap_radius

    t = jacksboro_fm.terrain
    mid = t.shape[0] // 2
    lat0 = t.transform.f + t.transform.e * mid
    lon0 = t.transform.c
    g = Geod(ellps="WGS84")
    ns = g.inv(lon0, lat0, lon0, lat0 + t.transform.e)[2]
    ew = g.inv(lon0, lat0 + t.transform.e / 2, lon0 + t.transform.a,
               lat0 + t.transform.e / 2)[2]
    assert 85 < ns < 100
    np.testing.assert_allclose(default_snap_radius(jacksboro_fm), max(30.0, ns, ew),
                               rtol=1e-3)


def test_points_on_a_channel_stay_put(jacksboro_fm):
    """Points placed on channel cells (upstream area >= 1 km²) of the real DEM, snapped
    with the default radius, move at most one cell (Chebyshev distance <= 1, within the
    radius on the ground), and every snap that changes the upstream area by more than 5 %
    says so in snap_warning, while those that change it less carry no area warning
    (common practice, no source)."""
    from basinkit.analysis.outlets import default_snap_radius, prepare_outlets

    fm = jacksboro_fm
    t = fm.terrain
    area = fm.upstream_area()
    rows, cols = np.nonzero(t.valid & (area >= 1e6))
    rng = np.random.default_rng(11)
    pick = rng.choice(rows.size, size=300, replace=False)
    r, c = rows[pick], cols[pick]
    x, y = t.xy_of(r, c)
    snapped, errors = prepare_outlets(fm, [(f"p{i}", a, b) for i, (a, b) in
                                           enumerate(zip(x, y))])
    assert not len(errors)
    radius = default_snap_radius(fm)
    assert (snapped["snap_distance_m"] <= radius + 1e-6).all()
    cheb = np.maximum(np.abs(snapped["row"] - r), np.abs(snapped["col"] - c))
    assert cheb.max() <= 1
    a0 = area[r, c]
    a1 = area[snapped["row"], snapped["col"]]
    change = np.abs(a1 - a0) / a0
    warned = snapped["snap_warning"].str.contains("upstream area|confluence|branch")
    np.testing.assert_array_equal(warned.to_numpy(), change > 0.05)
    assert (change > 0.05).any()  # the sample exercises the warning


def test_snapping_is_recorded_in_every_output(tmp_path, flow_dir, capsys):
    """catchments.json states the snapping used: mode, radius in metres, whether it was
    the default (max(30 m, one cell): 30 m on this 10 m grid)."""
    x, y = xy(10, 30)
    code, err = run(["delineate", flow_dir, "--outlet", f"{x},{y}", "-o", tmp_path / "o"],
                    capsys)
    assert code == 0, err
    rec = json.loads((tmp_path / "o" / "catchments.json").read_text())["snapping"]
    assert rec["radius_m"] == 30.0 and rec["radius_default"] is True
    assert rec["mode"].startswith("greatest upstream area")
    assert rec["default_radius_rule"] == "max(30 m, one cell)"
    code, err = run(["delineate", flow_dir, "--outlet", f"{x},{y}", "--snap-radius", "15m",
                     "-o", tmp_path / "p"], capsys)
    rec = json.loads((tmp_path / "p" / "catchments.json").read_text())["snapping"]
    assert rec["radius_m"] == 15.0 and rec["radius_default"] is False


def test_reading_notes_are_recorded(tmp_path, capsys):
    """How an outlet file was read (here ';' and decimal commas) is written into
    catchments.json beside the snapping, not only printed (DESIGN.md, provenance)."""
    p = write_tif(tmp_path / "plane.tif", plane())
    code, err = run(["route", p, "-o", tmp_path / "flow"], capsys)
    assert code == 0, err
    b = tmp_path / "comma.csv"
    b.write_text("id;x;y\nA;500155,5;4999655,25\n")
    code, err = run(["delineate", tmp_path / "flow", "--outlets", b, "-o", tmp_path / "c"],
                    capsys)
    assert code == 0, err
    rec = json.loads((tmp_path / "c" / "catchments.json").read_text())
    notes = rec["snapping"]["outlet_file_notes"]
    assert len(notes) == 1 and "decimal commas" in notes[0]
