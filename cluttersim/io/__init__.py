"""Reading and writing: DEMs and their datums and CRSs, radargram files, observed radargrams (and their readers), atomic outputs."""
