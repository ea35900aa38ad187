//! The S-estimate start by random elemental subsamples (Salibián-Barrera & Yohai 2006).
