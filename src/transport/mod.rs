//! Transports: placeholder until the line reader lands.
