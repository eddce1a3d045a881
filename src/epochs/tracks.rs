//! Linking landmarks of several epochs into tracks (one physical landmark each). Pure.
//!
//! **In:** the number of landmarks of each epoch and the control points of every pairwise
//! match (epoch pair, landmark indices, residual). **Out:** tracks: per epoch the landmark
//! index or none, and the count of conflicting links refused.
//!
//! A union-find over (epoch, landmark) nodes joins the two landmarks of every control point.
//! A track never holds two landmarks of one epoch: the links are applied best first (smallest
//! residual in its pairwise fit, ties by pair order then landmark index), and a link whose two
//! tracks both already hold a landmark of the same epoch is refused and counted as a conflict
//! (the better-fitting links made before it win). Links between landmarks already in one
//! track agree and change nothing.

/// The most epochs a run takes (a track's epochs are a 128-bit set).
pub const MAX_EPOCHS: usize = 128;

/// One control point of a pairwise match, as a link between two epochs' landmarks.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Link {
    /// Epoch of the first landmark.
    pub epoch_a: usize,
    /// Its index in that epoch.
    pub landmark_a: u32,
    /// Epoch of the second landmark.
    pub epoch_b: usize,
    /// Its index.
    pub landmark_b: u32,
    /// Residual of the control point in its pairwise fit, metres (the order of linking).
    pub residual_m: f64,
}

/// The tracks found.
#[derive(Debug, Clone, PartialEq)]
pub struct Linked {
    /// Each track: per epoch the landmark index, or `None`. Only tracks of two or more
    /// landmarks; ordered by their smallest (epoch, landmark).
    pub tracks: Vec<Vec<Option<u32>>>,
    /// Links refused because they would put two landmarks of one epoch into one track.
    pub conflicts: usize,
    /// Links whose landmarks were already in one track (consistent, redundant).
    pub agreeing: usize,
}

/// Links the landmarks of `sizes.len()` epochs (`sizes[k]` landmarks in epoch k) by `links`.
pub fn link(sizes: &[usize], links: &[Link]) -> Linked {
    assert!(sizes.len() <= MAX_EPOCHS, "at most {MAX_EPOCHS} epochs");
    let mut offset = Vec::with_capacity(sizes.len() + 1);
    offset.push(0usize);
    for s in sizes {
        offset.push(offset.last().unwrap() + s);
    }
    let total = *offset.last().unwrap();
    let node_epoch = |node: usize| offset.partition_point(|&o| o <= node) - 1;
    let mut parent: Vec<u32> = (0..total as u32).collect();
    let mut size = vec![1u32; total];
    let mut mask = vec![0u128; total];
    for (k, w) in offset.windows(2).enumerate() {
        for m in &mut mask[w[0]..w[1]] {
            *m = 1u128 << k;
        }
    }
    fn find(parent: &mut [u32], mut x: u32) -> u32 {
        while parent[x as usize] != x {
            let p = parent[x as usize];
            parent[x as usize] = parent[p as usize];
            x = p;
        }
        x
    }
    let mut order: Vec<usize> = (0..links.len()).collect();
    order.sort_by(|&i, &j| {
        links[i]
            .residual_m
            .total_cmp(&links[j].residual_m)
            .then(i.cmp(&j))
    });
    let (mut conflicts, mut agreeing) = (0, 0);
    for i in order {
        let l = links[i];
        let u = (offset[l.epoch_a] + l.landmark_a as usize) as u32;
        let v = (offset[l.epoch_b] + l.landmark_b as usize) as u32;
        let (ru, rv) = (find(&mut parent, u), find(&mut parent, v));
        if ru == rv {
            agreeing += 1;
            continue;
        }
        if mask[ru as usize] & mask[rv as usize] != 0 {
            conflicts += 1;
            continue;
        }
        let (big, small) = if size[ru as usize] >= size[rv as usize] {
            (ru, rv)
        } else {
            (rv, ru)
        };
        parent[small as usize] = big;
        size[big as usize] += size[small as usize];
        mask[big as usize] |= mask[small as usize];
    }
    let mut track_of = vec![u32::MAX; total];
    let mut tracks: Vec<Vec<Option<u32>>> = Vec::new();
    for node in 0..total {
        let r = find(&mut parent, node as u32) as usize;
        if size[r] < 2 {
            continue;
        }
        if track_of[r] == u32::MAX {
            track_of[r] = tracks.len() as u32;
            tracks.push(vec![None; sizes.len()]);
        }
        let k = node_epoch(node);
        tracks[track_of[r] as usize][k] = Some((node - offset[k]) as u32);
    }
    Linked {
        tracks,
        conflicts,
        agreeing,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn l(ea: usize, a: u32, eb: usize, b: u32, r: f64) -> Link {
        Link {
            epoch_a: ea,
            landmark_a: a,
            epoch_b: eb,
            landmark_b: b,
            residual_m: r,
        }
    }

    #[test]
    fn links_chain_through_epochs_and_refuse_conflicts() {
        // 0:0 - 1:0 - 2:0 and 0:1 - 2:1; a worse link 1:0 - 2:1 would put 2:0 and 2:1 together.
        let links = [
            l(0, 0, 1, 0, 0.1),
            l(1, 0, 2, 0, 0.2),
            l(0, 1, 2, 1, 0.1),
            l(1, 0, 2, 1, 0.9),
            l(0, 0, 2, 0, 0.3),
        ];
        let t = link(&[2, 1, 2], &links);
        assert_eq!(t.conflicts, 1);
        assert_eq!(t.agreeing, 1);
        assert_eq!(
            t.tracks,
            vec![
                vec![Some(0), Some(0), Some(0)],
                vec![Some(1), None, Some(1)]
            ]
        );
    }

    #[test]
    fn the_better_link_wins_a_conflict() {
        // Both 1:0 and 1:1 claim 0:0; 1:1 fits better.
        let links = [l(0, 0, 1, 0, 0.5), l(0, 0, 1, 1, 0.2)];
        let t = link(&[1, 2], &links);
        assert_eq!(t.conflicts, 1);
        assert_eq!(t.tracks, vec![vec![Some(0), Some(1)]]);
    }
}
