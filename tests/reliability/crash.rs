//! (to be written: kill -9 while a historian posts)
