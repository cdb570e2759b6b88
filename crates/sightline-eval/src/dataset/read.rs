//! Reading datasets (streaming, validated, with located errors).
