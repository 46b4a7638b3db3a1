# For people who run Snakemake directly from a source checkout:
#   snakemake --cores 2 --directory OUT --config chairqm_config=/abs/path.yaml
# The workflow itself ships inside the package (chairqm/workflow/Snakefile); `chairqm run` uses that
# copy, wherever chairqm is installed. From an installed chairqm without the source tree:
#   snakemake --snakefile "$(python -c 'import chairqm.workflow as w; print(w.snakefile())')" ...


include: "chairqm/workflow/Snakefile"
