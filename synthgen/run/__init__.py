"""Running the pipeline over many images: render in workers, journal, write the dataset directory."""
