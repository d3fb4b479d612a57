//! The passes over pairs of units: exact through a grid of cells as wide as the cutoff, or a
//! seeded, weighted sample.

use super::*;

/// Units sorted into square cells of side = cutoff, by (column, row), ties by
/// index; coordinates and centred values copied in that order.
pub(super) struct Grid {
    pub(super) x: Vec<f64>,
    pub(super) y: Vec<f64>,
    pub(super) z: Vec<f64>,
    /// The cell of each sorted unit (position in `cells`).
    pub(super) cell_of: Vec<u32>,
    /// Occupied cells, ascending (column, row), with their unit ranges.
    pub(super) cells: Vec<Cell>,
}

#[derive(Debug, Clone, Copy)]
pub(super) struct Cell {
    pub(super) key: (i64, i64),
    pub(super) start: usize,
    pub(super) end: usize,
}

impl Grid {
    pub(super) fn new(points: &[[f64; 2]], z: &[f64], extent: &Extent, side: f64) -> Grid {
        let key = |p: &[f64; 2]| {
            (
                ((p[0] - extent.min[0]) / side).floor() as i64,
                ((p[1] - extent.min[1]) / side).floor() as i64,
            )
        };
        let mut order: Vec<(i64, i64, u32)> = points
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let (c, r) = key(p);
                (c, r, i as u32)
            })
            .collect();
        order.par_sort_unstable();
        let mut cells: Vec<Cell> = Vec::new();
        let mut cell_of = Vec::with_capacity(order.len());
        for (position, &(c, r, _)) in order.iter().enumerate() {
            match cells.last_mut() {
                Some(cell) if cell.key == (c, r) => cell.end = position + 1,
                _ => cells.push(Cell {
                    key: (c, r),
                    start: position,
                    end: position + 1,
                }),
            }
            cell_of.push((cells.len() - 1) as u32);
        }
        Grid {
            x: order.iter().map(|o| points[o.2 as usize][0]).collect(),
            y: order.iter().map(|o| points[o.2 as usize][1]).collect(),
            z: order.iter().map(|o| z[o.2 as usize]).collect(),
            cell_of,
            cells,
        }
    }

    /// The unit range of the cells `(column, rows)` (contiguous when sorted).
    fn column_range(&self, column: i64, rows: (i64, i64)) -> (usize, usize) {
        let first = self.cells.partition_point(|c| c.key < (column, rows.0));
        let last = self.cells.partition_point(|c| c.key <= (column, rows.1));
        if first >= last {
            (0, 0)
        } else {
            (self.cells[first].start, self.cells[last - 1].end)
        }
    }
}

/// Every pair within the cutoff, each unordered pair once.
pub(super) fn exact_pass(grid: &Grid, edges: &[f64]) -> (Sums, Vec<f64>) {
    let n = grid.x.len();
    let lags = edges.len() - 1;
    let cutoff = edges[lags];
    let inverse_width = 1.0 / edges[1];
    let reject_above = cutoff * cutoff * (1.0 + 1e-9);
    // Per cell: the later units of its own column within one row, and the
    // three cells of the next column.
    let ranges: Vec<[(usize, usize); 2]> = grid
        .cells
        .iter()
        .map(|cell| {
            let (column, row) = cell.key;
            let own = grid.column_range(column, (row, row + 1));
            let next = grid.column_range(column + 1, (row - 1, row + 1));
            [own, next]
        })
        .collect();
    let chunks = n.div_ceil(EXACT_CHUNK);
    let groups = chunks.min(4 * rayon::current_num_threads()).max(1);
    let per_group = chunks.div_ceil(groups);
    let results: Vec<(Vec<Sums>, Vec<u32>)> = (0..groups)
        .into_par_iter()
        .map(|g| {
            let mut degrees = vec![0u32; n * lags];
            let mut chunk_sums = Vec::new();
            for chunk in g * per_group..((g + 1) * per_group).min(chunks) {
                let mut bins = vec![ExactBin::default(); lags];
                let mut coincident = 0u64;
                for i in chunk * EXACT_CHUNK..((chunk + 1) * EXACT_CHUNK).min(n) {
                    let [own, next] = ranges[grid.cell_of[i] as usize];
                    let (xi, yi, zi) = (grid.x[i], grid.y[i], grid.z[i]);
                    let mut degree_i = [0u32; MAX_LAGS];
                    for (start, end) in [(i + 1, own.1), next] {
                        let candidates = grid.x[start..end]
                            .iter()
                            .zip(&grid.y[start..end])
                            .zip(&grid.z[start..end])
                            .zip(degrees[start * lags..end * lags].chunks_exact_mut(lags));
                        for (((&xj, &yj), &zj), degree_j) in candidates {
                            let dx = xj - xi;
                            let dy = yj - yi;
                            let d2 = dx * dx + dy * dy;
                            // Cheap rejection on d², then the exact test on d.
                            if d2 > reject_above {
                                continue;
                            }
                            let d = d2.sqrt();
                            if d > cutoff {
                                continue;
                            }
                            if d == 0.0 {
                                coincident += 1;
                                continue;
                            }
                            let k = lag_of(d, edges, inverse_width);
                            let bin = &mut bins[k];
                            bin.count += 1;
                            bin.distance += d;
                            bin.squared_difference += (zi - zj) * (zi - zj);
                            bin.cross_product += zi * zj;
                            degree_i[k] += 1;
                            degree_j[k] += 1;
                        }
                    }
                    for (total, own) in degrees[i * lags..(i + 1) * lags].iter_mut().zip(degree_i) {
                        *total += own;
                    }
                }
                let mut sums = Sums::new(lags);
                for (k, bin) in bins.iter().enumerate() {
                    sums.count[k] = bin.count;
                    sums.weight[k] = bin.count as f64;
                    sums.distance[k] = bin.distance;
                    sums.squared_difference[k] = bin.squared_difference;
                    sums.cross_product[k] = bin.cross_product;
                }
                sums.coincident = coincident as f64;
                chunk_sums.push(sums);
            }
            (chunk_sums, degrees)
        })
        .collect();
    let mut total = Sums::new(lags);
    let mut degrees = vec![0u32; n * lags];
    for (chunk_sums, group_degrees) in &results {
        for sums in chunk_sums {
            total.merge(sums);
        }
        for (total_degree, degree) in degrees.iter_mut().zip(group_degrees) {
            *total_degree += degree;
        }
    }
    let mut degree_squared = vec![0.0; lags];
    for unit in degrees.chunks_exact(lags) {
        for (k, &d) in unit.iter().enumerate() {
            degree_squared[k] += f64::from(d) * f64::from(d);
        }
    }
    (total, degree_squared)
}

/// The weighted pair sample (see the module doc).
pub(super) fn sampled_pass(grid: &Grid, edges: &[f64], draws: u64, seed: u64) -> Sums {
    let n = grid.x.len();
    let lags = edges.len() - 1;
    let cutoff = edges[lags];
    let inverse_width = 1.0 / edges[1];
    // Per cell: the unit ranges of the three columns of its 3 × 3 block, and
    // the block's unit count.
    let blocks: Vec<([(usize, usize); 3], usize)> = grid
        .cells
        .iter()
        .map(|cell| {
            let (column, row) = cell.key;
            let ranges = [-1, 0, 1].map(|dc| grid.column_range(column + dc, (row - 1, row + 1)));
            let count = ranges.iter().map(|(s, e)| e - s).sum();
            (ranges, count)
        })
        .collect();
    let block_size = |i: usize| blocks[grid.cell_of[i] as usize].1;
    let n_blocks = draws.div_ceil(SAMPLE_BLOCK);
    let results: Vec<Sums> = (0..n_blocks)
        .into_par_iter()
        .map(|b| {
            let mut sums = Sums::new(lags);
            let mut stream = IndexStream::new(seed, b);
            let in_block = SAMPLE_BLOCK.min(draws - b * SAMPLE_BLOCK);
            for _ in 0..in_block {
                let i = stream.index_below(n as u32) as usize;
                let (ranges, count) = blocks[grid.cell_of[i] as usize];
                if count < 2 {
                    continue;
                }
                // Uniform over the block's units other than i: draw a rank
                // among count − 1 and step over i's own rank.
                let mut u = stream.index_below((count - 1) as u32) as usize;
                if u >= rank_in(&ranges, i) {
                    u += 1;
                }
                let j = at_rank(&ranges, u);
                let dx = grid.x[j] - grid.x[i];
                let dy = grid.y[j] - grid.y[i];
                let d = (dx * dx + dy * dy).sqrt();
                if d > cutoff {
                    continue;
                }
                let probability =
                    (1.0 / (count - 1) as f64 + 1.0 / (block_size(j) - 1) as f64) / n as f64;
                let weight = 1.0 / (draws as f64 * probability);
                if d == 0.0 {
                    sums.coincident += weight;
                    continue;
                }
                let k = lag_of(d, edges, inverse_width);
                sums.add(k, d, grid.z[i], grid.z[j], weight);
            }
            sums
        })
        .collect();
    let mut total = Sums::new(lags);
    for sums in &results {
        total.merge(sums);
    }
    total
}

/// The rank of position `i` among the units of the ranges, in order.
#[inline]
pub(super) fn rank_in(ranges: &[(usize, usize); 3], i: usize) -> usize {
    let mut before = 0;
    for &(start, end) in ranges {
        if (start..end).contains(&i) {
            return before + i - start;
        }
        before += end - start;
    }
    before
}

/// The position of the unit of rank `u` among the units of the ranges.
#[inline]
pub(super) fn at_rank(ranges: &[(usize, usize); 3], mut u: usize) -> usize {
    for &(start, end) in ranges {
        if u < end - start {
            return start + u;
        }
        u -= end - start;
    }
    // Unreachable for u below the ranges' total; the last unit otherwise.
    ranges[2].1.max(1) - 1
}
