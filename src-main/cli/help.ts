// Help for `scanfold --help` (the commands) and `scanfold COMMAND --help` (every flag of one).
import { DTYPES } from '../../src-shared/model/dtype';

const SOURCE = `source flags (which data to read):
  --dataset PATH          HDF5: the dataset inside the file (without it, info lists the candidates)
  --scan-shape SY,SX      3-D data (positions, det_y, det_x): the scan's rows and columns
  --raw-shape SY,SX,KY,KX raw binary: the 4-D shape (scan_y, scan_x, det_y, det_x)
  --dtype NAME            raw binary: ${DTYPES.join(', ')}
  --byte-order little|big raw binary: byte order (default little)
  --offset BYTES          raw binary: header bytes to skip (default 0)
  --trailer BYTES         raw binary: bytes after the data that are not part of it (default 0; a
                          file longer than offset + data + trailer is refused)
  --format hdf5|npy|raw   only when the file's first bytes cannot tell`;

const ENGINE = `engine flags:
  --workers N             worker threads (default: available cores; at most twice the cores)
  --budget SIZE           memory budget for a job, e.g. 1GiB, 256MiB (default 1GiB, at most the
                          machine's memory; counts worker threads, readers, tiles and results)
  --preview-budget SIZE   preview cube budget (default 32MiB: commands use the cube only to find
                          vacuum; at most a quarter of the budget, ≤ 3GiB)
  --kernel wasm|reference kernels: WebAssembly SIMD (default) or the plain TypeScript reference
  --quiet                 no progress bars or notes on success`;

const OUT = `  --out OUT.h5            where the results go: written beside it in a private temporary folder and
                          renamed when complete; never a file the command reads, a folder, a device,
                          a FIFO or a file you may not write; a symlink is written through`;

const SESSION = `  --session FILE.scanfold.h5
                          also add the result and its recipe (the request as given; the values
                          chosen for the rest are in the result) to a
                          session file, created if missing, replaced atomically; --out is then optional
  --as NAME               the result's name in the session (default: the command's name, numbered
                          when taken: pca, pca-2, …); a name already there is replaced`;

const BAD_PIXELS = `  --bad-pixels auto|none  auto (default): hot and dead detector pixels, found on the mean and max
                          pattern of a first pass, are left out; none keeps every pixel`;

export const COMMAND_HELP: Record<string, string> = {
  serve: `scanfold serve [FILE [source flags]] [--port N] [engine flags]
  The application in a browser: the UI and the engine on 127.0.0.1 only, behind a random token in
  the address it prints (a request or connection without it is refused). With FILE, the dataset
  is opened and its first pass started before the address is printed; other files are opened
  from the page. Ctrl-C stops. To look at data on another machine, forward the port over SSH
  (ssh -L N:127.0.0.1:N host) and open the printed address locally.
  --port N                the port (default 0: any free one)
  --preview-budget SIZE   preview cube for detector drags (default 128MiB here)

${SOURCE}

${ENGINE}`,
  info: `scanfold info FILE [source flags]
  Print the dataset descriptor as JSON; for an HDF5 file without --dataset, its candidate datasets.

${SOURCE}`,

  summary: `scanfold summary FILE [source flags] --out OUT.h5 [engine flags]
  The first streaming pass: /mean_pattern, /max_pattern (det_y, det_x) and /total_intensity
  (scan_y, scan_x; every pixel), float64; with bad pixels found (and watched by the pass, as all
  but the rare detector with very many are), /total_intensity_less_bad_pixels
  too (a few hot pixels can outweigh the specimen); from the same read /bright_field (the disk
  found on 16 patterns sampled across the scan) and /annular_dark_field (twice its radius to the
  detector's edge).

${OUT}

${SOURCE}

${ENGINE}`,

  image: `scanfold image FILE [source flags] DETECTOR… --out OUT.h5 [engine flags]
  Virtual images of any number of detectors in one pass: /images (n_detectors, scan_y, scan_x),
  float64, in the order the detectors are given. Detector coordinates are detector pixels:
  x the column, y the row, pixel centres at whole numbers.

detectors (any number, any mix):
  --disk CX,CY,R          pixels whose centre is within R of (CX, CY)
  --annulus CX,CY,R0,R1   pixels with R0 < distance ≤ R1 (inner exclusive, outer inclusive)
  --rect X0,Y0,X1,Y1      pixels with X0 ≤ x ≤ X1 and Y0 ≤ y ≤ Y1 (smaller corner first)
  --polygon "X,Y X,Y X,Y" pixels inside the polygon (even–odd rule; edges count as inside)
  --mask MASK.npy         a 2-D .npy of the detector's shape: 0/1 (or boolean) selects pixels;
                          weights between 0 and 1 count each pixel by its weight
  --weighted              drawn shapes count each pixel by the fraction of its area inside
${BAD_PIXELS}
${OUT}
${SESSION}

${SOURCE}

${ENGINE}`,

  com: `scanfold com FILE [source flags] [flags] --out OUT.h5 [engine flags]
  Centre of mass of every pattern (Σ I·x / Σ I), as shifts after descan and rotation:
  /com_x, /com_y (detector px), /total_intensity, /magnitude, /direction, /divergence, /curl,
  /phase (integrated COM); with the calibration also /com_x_mrad, /com_y_mrad, /phase_radians.

flags:
  --descan auto|none|mean|plane|reference
                          auto (default): vacuum found in the scan (positions whose patterns scatter
                          nothing outside the bright-field disk) is the reference, else the mean COM
                          is removed; none: positions on the detector; mean: remove the mean COM;
                          plane: remove a fitted plane; reference: remove the mean over --descan-region
  --descan-region X0,Y0,X1,Y1
                          scan positions (x column, y row) of a reference area such as vacuum
  --rotation auto|DEGREES and --flip auto|yes|no
                          the scan-to-detector rotation and flip: auto (default, both) estimates them
                          by least curl, the half-turn settled by vacuum when there is some; or give both
  --mask-disk CX,CY,R     only pixels inside this disk (detector px) count towards the COM
  --threshold T           pixels below T count as 0, those equal to T count (may be negative); 0, the
                          default, means no threshold (negative values of float data count too)
  --mrad-per-pixel M --energy-kev E --scan-step-nm S
                          together: also give the COM in mrad and the phase in radians
${BAD_PIXELS}
${OUT}
${SESSION}

${SOURCE}

${ENGINE}`,

  calibrate: `scanfold calibrate FILE [source flags] [flags] [--out OUT.h5] [engine flags]
  Wavelength, bright-field disk, mrad and Å⁻¹ per detector pixel, printed as JSON (and written to
  --out as attributes when given). Values not given are read from the dataset's attributes
  (beam_energy_kev, convergence_semiangle_mrad, scan_step_nm, …); the output says where each came from.

flags:
  --energy-kev E          beam energy in keV
  --convergence-mrad A    convergence semi-angle in mrad: mrad/px = A / the disk's radius in px
  --lattice-spacing-angstrom D
                          instead: a lattice spacing in Å whose Bragg ring or disks are visible; when
                          the patterns show several rings, they are listed and the command asks for:
  --bragg-distance-px G   the distance (px) of that ring or disk from the centre
  --scan-step-nm S        the distance between probe positions in nm
${OUT.replace('where the results go', 'optional: also write the calibration there')}
${SESSION}

${SOURCE}

${ENGINE}`,

  pattern: `scanfold pattern FILE [source flags] REGION --out OUT.h5 [engine flags]
  Virtual diffraction: /mean_pattern and /max_pattern (det_y, det_x) float64 over a region of the
  scan (scan positions: x column, y row).

region (exactly one):
  --region-rect X0,Y0,X1,Y1   positions with X0 ≤ x ≤ X1 and Y0 ≤ y ≤ Y1 (smaller corner first)
  --region-polygon "X,Y X,Y X,Y"
                              positions inside the polygon
  --region-mask MASK.npy      a 2-D .npy of the scan's shape, nonzero where the region is
${OUT}
${SESSION}

${SOURCE}

${ENGINE}`,

  pca: `scanfold pca FILE [source flags] --components K [flags] --out OUT.h5 [engine flags]
  PCA of every pattern by randomized SVD of the mean-centred feature vectors, streamed (the data
  are read power-iterations + 1 times): /singular_values, /explained_variance_ratio,
  /components (k, det_y', det_x': each a pattern on the binned detector), /loadings (k, scan_y,
  scan_x: each position's coordinate along a component), /mean_pattern; every choice in attributes.

features (how a pattern becomes a vector):
  --bin auto|1|2|4|8      detector binning (default auto: the least giving at most 64×64 bins)
  --crop X0,Y0,X1,Y1      only these detector pixels (inclusive; trimmed to whole bins)
  --scaling none|sqrt|poisson
                          none (default); sqrt: square root of the counts (steadies Poisson noise);
                          poisson: each value over √(pattern mean × bin mean) (Keenan & Kotula 2004)
  --normalize             divide each pattern by its total first (not with --scaling poisson)
  --bad-pixels auto|none  auto (default): bins holding a hot or dead pixel are left out (NaN in the
                          outputs); none keeps every pixel

method:
  --components K          how many components (at most the number of patterns and of bins)
  --oversample P          extra random directions in the sketch (default 10)
  --power-iterations Q    passes that sharpen the sketch (default 2; 0 reads the data once; the
                          top singular values of a slowly decaying spectrum are within 0.01 % of an
                          exact SVD at Q = 1 in our tests and within 8 % at Q = 0)
  --seed S                seed of the random sketch (default 0): the same input and seed give the
                          same output, whatever the workers or budget
  --uncentred             leave the mean in (its first component is then about the mean pattern)
  --passes 1              read the data once: range and co-range sketches (Tropp et al. 2017),
                          less accurate than power iterations (see the README for figures)
  --preview               a quick look: PCA of the preview cube (binned scan and detector, see
                          --preview-budget) after the first pass, with no further read of the data
${OUT}
${SESSION}

${SOURCE}

${ENGINE}`,

  kmeans: `scanfold kmeans FILE [source flags] --clusters K [flags] --out OUT.h5 [engine flags]
  k-means of every pattern on its first principal components (a streamed PCA of 2 passes, then one
  more for the clusters' mean patterns): /labels (int32, scan_y × scan_x), /centers (k × components),
  /cluster_patterns (k, det_y, det_x: each cluster's mean pattern), /sizes; inertia and every
  choice in attributes.

  --clusters K            how many clusters
  --features pca:N|patterns
                          pca:N (default pca:10): each position's coordinates along the first N
                          principal components; patterns: the binned patterns themselves, streamed
                          (k-means++ on 16 sampled scan rows, then one pass per Lloyd iteration)
  --max-iterations M      with patterns: at most M iterations, each a pass over the data (default 30)
  --restarts R            k-means++ starts; the lowest inertia is kept (default 10)
  --algorithm lloyd|mini-batch
                          full Lloyd iterations (default up to 2²⁰ positions) or mini-batches of
                          4096 positions (Sculley 2010; the default for larger scans)
  --seed S                seed of the PCA sketch and of the starts (default 0)
  --power-iterations Q    of the PCA (default 1: clustering needs the leading components, not
                          their last digits; each iteration reads the data once more)
  --preview               a quick look: clusters of the preview cube, with no further read of the data
  --bin, --crop, --scaling, --normalize, --bad-pixels
                          how patterns become vectors, as for pca (scanfold pca --help)
${OUT}
${SESSION}

${SOURCE}

${ENGINE}`,

  fit: `scanfold fit FILE [source flags] --reference-region X0,Y0,X1,Y1 [...] | --reference-clusters KMEANS.h5 [flags] --out OUT.h5 [engine flags]
  Every pattern fitted as a least-squares combination of reference patterns, each the mean pattern
  of a region of the scan (two passes): /coefficients (r, scan_y, scan_x: the weight of each
  reference), /residual (scan_y, scan_x: ‖pattern − fit‖ / ‖pattern‖, where no reference
  explains what is there), /references (r, det_y', det_x').

  --reference-region X0,Y0,X1,Y1
                          scan positions (x column, y row, inclusive) whose mean pattern is a
                          reference; repeat for each reference (1 to 16)
  --reference-clusters KMEANS.h5
                          every cluster of a scanfold kmeans output (its /labels) is a reference:
                          the mean pattern of its positions
  --nonnegative           weights ≥ 0 (Lawson & Hanson's non-negative least squares)
  --bin, --crop, --scaling, --normalize, --bad-pixels
                          how patterns become vectors, as for pca (scanfold pca --help)
${OUT}
${SESSION}

${SOURCE}

${ENGINE}`,

  sample: `scanfold sample [--size tiny|demo|large] --out FILE.h5 [--seed N]
  Write a demo dataset of our own synthetic scenario (ground truth under /truth).
  --size                  tiny, demo (default; 64×64 × 96×96) or large (256×256 × 128×128, 2 GiB)
  --seed N                random seed (a whole number)
${OUT}`,

  session: `scanfold session show FILE.scanfold.h5 [--relink OLD=NEW]… [--json]
scanfold session apply FILE.scanfold.h5 --to DATA [source flags] --out NEW.scanfold.h5 [engine flags]
  show: the session's datasets (found at their recorded path, moved: found relative to the session
  or beside it with the same fingerprint, missing, or different: other data where it was), its
  results in the order they were made with their recipes and arrays, and the app's setup.
  apply: replay every recipe of the session, in order, on another dataset (a facility's batch job:
  one recipe, many datasets) and write a new session; on an identical copy the results are
  bitwise identical. The session applied is left as it is.
  --relink OLD=NEW        where moved data now is: OLD is the recorded path, its file name or the
                          session's dataset id (data-1); data there with another fingerprint is refused
  --json                  the listing as JSON
  --to DATA               the dataset to replay the recipe on, with its source flags
  --out NEW.scanfold.h5   the new session

${SOURCE}

${ENGINE}`,

  export: `scanfold export FILE.scanfold.h5 KEY[/ARRAY] --format png|tiff|npy|csv --out FILE [flags]
scanfold export FILE.scanfold.h5 KEY [KEY…] --format h5 --out SET.h5
  One array of a session's results for other programs (session show lists them, e.g. com/phase,
  pca/loadings); the data the session was made from need not be present.
  --format png            a figure: the colour map, a colour bar with its limits and, when the session
                          holds a calibration (a calibrate result, or the app's scan step), a scale
                          bar in nm (scan) or mrad (detector)
           tiff           the raw values as a float32 TIFF (2-D)
           npy            the whole array, as stored (float64; int32 for labels and counts)
           csv            1-D or 2-D results (scree, cluster sizes, centres)
           h5             whole results (export FILE KEY KEY … --format h5): an HDF5 file holding
                          just them, laid out as in the session (h5py reads it, Scanfold reopens it)
  --out FILE              where it goes (written whole or not at all)
  --index I               one image of a 3-D stack (a component, a cluster, a detector)
  --colormap NAME         png: viridis, cividis, magma, sinebow or categories (default: categories
                          for a cluster map, sinebow over −π … π for the COM direction, viridis
                          for the rest)
  --scaling linear|log|gamma:G
                          png: how values map onto the colours (default linear)
  --limits LO,HI          png: the colour bar's limits (default: 0.5th and 99.5th percentiles)
  --scan-step-nm S        png: the scan step, when the session holds none
  --mrad-per-pixel M      png: the detector's calibration, when the session holds none`,

  demo: `scanfold demo [--dir DIR] [engine flags]
  Make the demo dataset once (DIR/demo.h5), run the first pass, write DIR/demo-summary.h5 and print
  what it found. DIR defaults to demo-data/ in the project.

${ENGINE}`,
};

export const OVERVIEW = `scanfold — exploratory analysis of 4D-STEM datasets far larger than memory

usage: scanfold COMMAND FILE [flags]      (scanfold COMMAND --help for every flag of a command)

commands:
  info       the dataset descriptor as JSON, or an HDF5 file's candidate datasets
  summary    the first pass: mean and max pattern, total intensity
  image      virtual images of any number of detectors, in one pass
  com        centre of mass: shifts, magnitude, direction, divergence, curl, integrated phase
  calibrate  wavelength, bright-field disk, mrad and Å⁻¹ per detector pixel
  pattern    mean and max pattern over a region of the scan
  pca        principal components of all patterns (randomized SVD, out of core)
  kmeans     clusters of all patterns (k-means on principal components) and their mean patterns
  fit        every pattern as a combination of reference patterns, with the residual
  session    list a session file (show), or replay its recipe on other data (apply)
  export     one result of a session as PNG (colour bar, scale bar), float32 TIFF, .npy or CSV
  serve      the application in a browser (127.0.0.1, behind a token); npm start for the desktop app
  sample     write a demo dataset of our own synthetic scenario
  demo       make the demo dataset and run the first pass over it

  scanfold --version       the version

Results are exploratory: check quantitative claims against your own validation.
Exit status: 0 success, 2 bad input or --out (nothing is written), 1 write failure or other error,
130 interrupted (Ctrl-C), 143 terminated.`;

/** The known flag closest to an unknown one, for "did you mean". */
export function closestFlag(unknown: string, known: readonly string[]): string | null {
  let best: string | null = null;
  let bestD = Infinity;
  for (const k of known) {
    const d = editDistance(unknown, k);
    if (d < bestD) { bestD = d; best = k; }
  }
  return best !== null && bestD <= Math.max(2, Math.floor(unknown.length / 3)) ? best : null;
}

function editDistance(a: string, b: string): number {
  const row = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    let prev = row[0];
    row[0] = i;
    for (let j = 1; j <= b.length; j++) {
      const cur = row[j];
      row[j] = Math.min(row[j] + 1, row[j - 1] + 1, prev + (a[i - 1] === b[j - 1] ? 0 : 1));
      prev = cur;
    }
  }
  return row[b.length];
}
