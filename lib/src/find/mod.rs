//! Peak finding: baseline removal, noise estimate, detection, sub-pixel centroids.
