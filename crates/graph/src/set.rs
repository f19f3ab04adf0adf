//! A fixed-capacity set of node indices, stored as a bit vector.

/// A set of node indices `0..capacity`. Invariant: no bit at or above
/// `capacity` is ever set, so equality and iteration need no masking.
#[derive(Clone, PartialEq, Eq, Hash, Debug)]
pub struct NodeSet {
    words: Vec<u64>,
    capacity: usize,
}

impl NodeSet {
    /// The empty set able to hold indices below `capacity`.
    pub fn new(capacity: usize) -> Self {
        NodeSet {
            words: vec![0; capacity.div_ceil(64)],
            capacity,
        }
    }

    /// The set holding the given indices.
    pub fn from_iter<I: IntoIterator<Item = usize>>(capacity: usize, items: I) -> Self {
        let mut s = NodeSet::new(capacity);
        for i in items {
            s.insert(i);
        }
        s
    }

    /// The set of every index below `capacity`.
    pub fn full(capacity: usize) -> Self {
        NodeSet::from_iter(capacity, 0..capacity)
    }

    /// Largest index plus one that the set can hold.
    pub fn capacity(&self) -> usize {
        self.capacity
    }

    /// Adds `i`; returns whether it was absent.
    pub fn insert(&mut self, i: usize) -> bool {
        assert!(i < self.capacity, "node index out of range");
        let (w, b) = (i / 64, 1u64 << (i % 64));
        let was = self.words[w] & b != 0;
        self.words[w] |= b;
        !was
    }

    /// Removes `i`; returns whether it was present.
    pub fn remove(&mut self, i: usize) -> bool {
        if i >= self.capacity {
            return false;
        }
        let (w, b) = (i / 64, 1u64 << (i % 64));
        let was = self.words[w] & b != 0;
        self.words[w] &= !b;
        was
    }

    /// Whether `i` is in the set.
    pub fn contains(&self, i: usize) -> bool {
        i < self.capacity && self.words[i / 64] & (1u64 << (i % 64)) != 0
    }

    /// Number of members.
    pub fn len(&self) -> usize {
        self.words.iter().map(|w| w.count_ones() as usize).sum()
    }

    /// Whether the set has no member.
    pub fn is_empty(&self) -> bool {
        self.words.iter().all(|&w| w == 0)
    }

    /// Members in increasing order.
    pub fn iter(&self) -> impl Iterator<Item = usize> + '_ {
        self.words.iter().enumerate().flat_map(|(wi, &w)| {
            let mut w = w;
            std::iter::from_fn(move || {
                if w == 0 {
                    None
                } else {
                    let t = w.trailing_zeros() as usize;
                    w &= w - 1;
                    Some(wi * 64 + t)
                }
            })
        })
    }

    /// Members as a vector, increasing.
    pub fn to_vec(&self) -> Vec<usize> {
        self.iter().collect()
    }

    /// `self ∪ other`.
    pub fn union(&self, other: &NodeSet) -> NodeSet {
        let mut s = self.clone();
        s.union_with(other);
        s
    }

    /// `self ∩ other`.
    pub fn intersection(&self, other: &NodeSet) -> NodeSet {
        let mut s = self.clone();
        for (a, b) in s.words.iter_mut().zip(&other.words) {
            *a &= *b;
        }
        s
    }

    /// `self \ other`.
    pub fn difference(&self, other: &NodeSet) -> NodeSet {
        let mut s = self.clone();
        for (a, b) in s.words.iter_mut().zip(&other.words) {
            *a &= !*b;
        }
        s
    }

    /// Adds every member of `other`.
    pub fn union_with(&mut self, other: &NodeSet) {
        for (a, b) in self.words.iter_mut().zip(&other.words) {
            *a |= *b;
        }
    }

    /// Whether the two sets share a member.
    pub fn intersects(&self, other: &NodeSet) -> bool {
        self.words.iter().zip(&other.words).any(|(a, b)| a & b != 0)
    }

    /// Whether every member of `self` is in `other`.
    pub fn is_subset(&self, other: &NodeSet) -> bool {
        self.words
            .iter()
            .zip(&other.words)
            .all(|(a, b)| a & !b == 0)
    }

    /// The smallest member, if any.
    pub fn first(&self) -> Option<usize> {
        self.iter().next()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn basic_operations() {
        let mut s = NodeSet::new(130);
        assert!(s.insert(0));
        assert!(s.insert(129));
        assert!(!s.insert(129));
        assert_eq!(s.to_vec(), vec![0, 129]);
        let t = NodeSet::from_iter(130, [1, 129]);
        assert_eq!(s.intersection(&t).to_vec(), vec![129]);
        assert_eq!(s.union(&t).len(), 3);
        assert_eq!(s.difference(&t).to_vec(), vec![0]);
        assert!(s.intersects(&t));
        assert!(!NodeSet::from_iter(130, [0]).is_subset(&t));
        assert!(s.remove(0));
        assert_eq!(s.first(), Some(129));
    }
}
