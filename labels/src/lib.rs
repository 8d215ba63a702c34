//! The site folder of symtrust: configuration, sheets, label documents, label QA,
//! the split by sheet, crop libraries, interchange formats and the synthetic plant.
#![deny(missing_docs)]

pub mod atomic;
pub mod clock;
pub mod coco_results;
pub mod crops;
pub mod detections;
pub mod document;
pub mod error;
pub mod geometry;
pub mod hash;
pub mod interchange;
pub mod nightly;
pub mod plant;
pub mod proposals;
pub mod qa;
pub mod raster;
pub mod rng;
pub mod sheets;
pub mod site;
pub mod split;
pub mod store;
pub mod synth;

pub use error::{LabelError, Result};
pub use geometry::{BBox, Window};
pub use rng::SeededRng;
