//! Sentence-level dense search: the candidate sentences (and lines) of
//! every chunk, whose vectors ingest already stores for answer selection,
//! in a graph of their own, so a chunk can be found by its best sentence
//! as well as by its whole text. A chunk scores as the better of the two.
//!
//! The graph is built in memory from the store when first asked for (a
//! second or so per 10,000 sentences) and not saved.
//!
//! invariant: a key is `chunk id << UNIT_BITS | the unit's position in
//! its chunk`, so every hit maps back to its chunk without a table.
//! invariant: reads the store; never writes it.

use crate::error::{Error, Result};
use crate::select::{candidate_units, sentence_input};
use crate::store::{Store, embedding_key};
use crate::types::ChunkId;
use crate::vectors::{DEFAULT_SCALAR, Neighbour};
use std::collections::{HashMap, HashSet};

/// Bits of a key that number a unit within its chunk; a chunk's units
/// past 2^12 are not indexed.
const UNIT_BITS: u32 = 12;

/// The graph of unit vectors.
pub struct UnitIndex {
    index: usearch::Index,
    dim: usize,
}

impl UnitIndex {
    /// Every chunk's candidate units that have a stored vector for `model`.
    pub fn build(store: &Store, model: &str, dim: usize) -> Result<UnitIndex> {
        let started = std::time::Instant::now();
        let mut wanted: Vec<(u64, String)> = Vec::new();
        store.for_each_chunk(|c| {
            for (i, (r, _)) in candidate_units(&c.text)
                .into_iter()
                .enumerate()
                .take(1 << UNIT_BITS)
            {
                let key = (c.id.0 << UNIT_BITS) | i as u64;
                wanted.push((key, embedding_key(&sentence_input(&c.text[r]))));
            }
            Ok(())
        })?;
        let index = crate::vectors::new_index(dim, DEFAULT_SCALAR)?;
        let bad = |e: String| Error::Invalid(format!("sentence vector graph: {e}"));
        index
            .reserve(wanted.len().max(1))
            .map_err(|e| bad(e.to_string()))?;
        let mut added = 0usize;
        for batch in wanted.chunks(512) {
            let keys: Vec<String> = batch.iter().map(|(_, k)| k.clone()).collect();
            let found = store.embeddings_by_key(model, &keys)?;
            for (key, text_key) in batch {
                if let Some(v) = found.get(text_key).filter(|v| v.len() == dim) {
                    index.add(*key, v).map_err(|e| bad(e.to_string()))?;
                    added += 1;
                }
            }
        }
        tracing::info!(
            "sentence vector graph: {added} of {} units in {:.1}s",
            wanted.len(),
            started.elapsed().as_secs_f64()
        );
        Ok(UnitIndex { index, dim })
    }

    pub fn len(&self) -> usize {
        self.index.size()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The `k` chunks whose best unit is nearest `query`, with that
    /// unit's cosine, among `allowed` chunks (all when `None`).
    pub fn search(
        &self,
        query: &[f32],
        allowed: Option<&HashSet<u64>>,
        k: usize,
    ) -> Result<Vec<Neighbour>> {
        if k == 0 || self.is_empty() || query.len() != self.dim {
            return Ok(Vec::new());
        }
        // Several units of a chunk may come first; read more to fill k chunks.
        let want = (k * 4).max(32);
        self.index
            .change_expansion_search(crate::vectors::EXPANSION_SEARCH.max(want));
        let bad = |e: String| Error::Invalid(format!("sentence vector graph: {e}"));
        let m = match allowed {
            Some(set) => self
                .index
                .filtered_search(query, want, |key| set.contains(&(key >> UNIT_BITS))),
            None => self.index.search(query, want),
        }
        .map_err(|e| bad(e.to_string()))?;
        let mut best: Vec<Neighbour> = Vec::new();
        let mut seen: HashSet<u64> = HashSet::new();
        for (&key, &d) in m.keys.iter().zip(&m.distances) {
            let chunk = key >> UNIT_BITS;
            if allowed.is_some_and(|s| !s.contains(&chunk)) || !seen.insert(chunk) {
                continue;
            }
            best.push(Neighbour {
                chunk_id: ChunkId(chunk),
                similarity: 1.0 - d,
            });
            if best.len() == k {
                break;
            }
        }
        Ok(best)
    }
}

/// Two dense rankings merged: each chunk scores as the better of its
/// similarities, best first (ties by chunk id), at most `k`.
pub fn merge_best(lists: &[&[Neighbour]], k: usize) -> Vec<Neighbour> {
    let mut best: HashMap<u64, f32> = HashMap::new();
    for list in lists {
        for n in *list {
            let e = best.entry(n.chunk_id.0).or_insert(f32::MIN);
            *e = e.max(n.similarity);
        }
    }
    let mut out: Vec<Neighbour> = best
        .into_iter()
        .map(|(id, similarity)| Neighbour {
            chunk_id: ChunkId(id),
            similarity,
        })
        .collect();
    out.sort_by(|a, b| {
        b.similarity
            .total_cmp(&a.similarity)
            .then(a.chunk_id.0.cmp(&b.chunk_id.0))
    });
    out.truncate(k);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_chunk_scores_as_its_better_similarity() {
        let n = |id: u64, s: f32| Neighbour {
            chunk_id: ChunkId(id),
            similarity: s,
        };
        let whole = [n(1, 0.50), n(2, 0.40), n(3, 0.30)];
        let sentences = [n(3, 0.70), n(1, 0.45)];
        let got: Vec<(u64, f32)> = merge_best(&[&whole, &sentences], 3)
            .iter()
            .map(|x| (x.chunk_id.0, x.similarity))
            .collect();
        assert_eq!(got, vec![(3, 0.70), (1, 0.50), (2, 0.40)]);
        assert_eq!(merge_best(&[&whole, &sentences], 1).len(), 1);
    }
}
