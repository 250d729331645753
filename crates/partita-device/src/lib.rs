//! Live audio through a Partita engine (in progress).
