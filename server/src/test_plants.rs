//! The smallest plant the shell's unit tests need: one node, one feed meter.

pub(crate) const TEE: &str = r#"
name = "tee"
[[component]]
id = "A"
molar_mass = 2.0
[[unit]]
id = "n"
kind = "node"
[[stream]]
id = "in"
from = "outside"
to = "n"
[[stream]]
id = "out"
from = "n"
to = "outside"
[[meter]]
tag = "F-1"
stream = "in"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
"#;
