//! Pure signal processing for calibrated microphone data (Welch PSD, tones, bands).
//!
//! Arrives with the spectrum service; the module exists so the layering is in place.
