//! From a fit to the shared result document.
